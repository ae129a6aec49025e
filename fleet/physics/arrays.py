"""Return convention of the physics functions: scalars in give a Python number, arrays in give an array."""

import numpy as np


def scalar_or_array(values, dtype=float):
    """A 0-d result as a Python scalar, anything else as the numpy array it is."""
    arr = np.asarray(values, dtype=dtype)
    return arr.item() if arr.ndim == 0 else arr

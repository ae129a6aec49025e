"""Where the folders fleet reads at run time are, installed or in a checkout.

migrations/ and templates/ sit at the top of a checkout (beside the package); a wheel carries them inside the
package as fleet/_migrations and fleet/_templates (setup.py maps them).
"""

from importlib.resources import files
from pathlib import Path


def folder(name: str) -> Path:
    """The folder ``name`` ("migrations" or "templates") belonging to the fleet package in use."""
    return find_folder(Path(str(files("fleet"))), name)


def find_folder(package: Path, name: str) -> Path:
    installed = package / f"_{name}"
    if installed.is_dir():
        return installed
    # Only a source tree (it holds pyproject.toml) counts: a bare site-packages/migrations belongs to someone else.
    checkout = package.parent / name
    if checkout.is_dir() and (package.parent / "pyproject.toml").is_file():
        return checkout
    raise FileNotFoundError(f"fleet's {name} folder is missing: neither {installed} nor {checkout} (in a checkout)")

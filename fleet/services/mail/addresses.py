"""Mail addresses as fleet accepts them: one plain address, nothing that could add a header."""

import re

MAX_LENGTH = 254  # RFC 5321's limit on a path, less its angle brackets
# local@domain: printable characters without spaces, angle brackets, commas or quotes; a dotted domain or
# "localhost" (a plant's own relay may deliver to it). Deliberately narrower than RFC 5322 allows.
_ADDRESS = re.compile(r"^[A-Za-z0-9.!#$%&'*+/=?^_`{|}~-]+@(?:[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?\.)*"
                      r"[A-Za-z0-9](?:[A-Za-z0-9-]{0,61}[A-Za-z0-9])?$")


class AddressError(ValueError):
    """An address fleet will not send to; the message says why."""


def check_address(address: str, what: str = "the address") -> str:
    """``address`` stripped, or AddressError."""
    address = (address or "").strip()
    if not address:
        raise AddressError(f"{what} is empty")
    if len(address) > MAX_LENGTH:
        raise AddressError(f"{what} is longer than {MAX_LENGTH} characters")
    if not _ADDRESS.match(address) or ".." in address:
        raise AddressError(f"{what} '{address}' is not a plain mail address like name@plant.example.invalid")
    return address

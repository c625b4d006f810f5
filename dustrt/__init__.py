"""dustrt: forward radiative transfer of sunlight scattered by fine dust above an airless limb.

Importing the package is cheap: numba kernels compile only when a computation first needs them.
"""

__version__ = "0.1.0"


class DustrtWarning(UserWarning):
    """Warning class for all dustrt physics and input warnings."""


def warn(message: str) -> None:
    """Emit a :class:`DustrtWarning` pointing at the caller's caller."""
    import warnings

    warnings.warn(message, DustrtWarning, stacklevel=3)

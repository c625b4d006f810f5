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


def use_plain_warnings(command: str):
    """Show dustrt's own warnings as one plain line ("dustrt COMMAND: warning: ..."), without
    Python's source excerpt; returns the previous formatter.  Idempotent (dask workers call it
    for every chunk)."""
    import warnings

    default = warnings.formatwarning
    if getattr(default, "dustrt_plain", False):
        return default

    def fmt(message, category, filename, lineno, line=None):
        if issubclass(category, DustrtWarning):
            return f"dustrt {command}: warning: {message}\n"
        return default(message, category, filename, lineno, line)

    fmt.dustrt_plain = True
    warnings.formatwarning = fmt
    return default

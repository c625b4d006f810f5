"""Whether numba's on-disk cache already holds dustrt's compiled kernels.

The kernels are compiled on first use (``cache=True``) and stored where numba
puts caches: ``NUMBA_CACHE_DIR`` if set, else the package's ``__pycache__``,
else the user cache folder (``$XDG_CACHE_HOME/numba`` or ``~/.cache/numba``)
when the package folder is read-only.  The CLI uses this only to tell a
first-time user why the first run is slow.
"""

from __future__ import annotations

import os
from pathlib import Path

KERNEL_MODULES = ("_mie_kernels", "_los_kernels")


def _cache_folders() -> list[Path]:
    env = os.environ.get("NUMBA_CACHE_DIR")
    if env:
        return [Path(env)]
    user = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "numba"
    return [Path(__file__).parent / "__pycache__", user]


def kernels_cached(modules=KERNEL_MODULES) -> bool:
    """True if an index file of every named kernel module is found in a cache folder."""
    for module in modules:
        pattern = f"{module}.*.nbi"
        if not any(next(folder.rglob(pattern), None) for folder in _cache_folders() if folder.is_dir()):
            return False
    return True

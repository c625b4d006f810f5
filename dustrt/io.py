"""netCDF and CSV input/output.  On-disk details (engine, compression) live here only.

Outputs are written to a temporary file in the destination folder and renamed
into place, so an interrupted or failed write never leaves a half-written file.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np
import xarray as xr

ENGINE = "h5netcdf"


def _encoding(ds: xr.Dataset) -> dict:
    enc = {}
    for name, var in ds.variables.items():
        if var.dtype.kind == "f" and var.ndim >= 1 and var.size > 1:
            enc[name] = {"zlib": True, "complevel": 4}
    return enc


def write_netcdf(ds: xr.Dataset, path: str | Path) -> Path:
    """Write ``ds`` atomically to ``path`` (temporary file + rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        ds.to_netcdf(tmp, engine=ENGINE, encoding=_encoding(ds))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def read_netcdf(path: str | Path) -> xr.Dataset:
    """Open a netCDF file fully into memory (the file is closed on return)."""
    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: file not found")
    try:
        with xr.open_dataset(path, engine=ENGINE) as ds:
            return ds.load()
    except (OSError, ValueError) as exc:
        raise ValueError(f"{path}: cannot be read as netCDF ({exc})") from None


def save_figure(fig, path: str | Path) -> Path:
    """Save a matplotlib figure atomically."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix or ".png", dir=path.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=120, bbox_inches="tight")
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def read_csv_table(path: str | Path, columns: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Read named numeric columns from a CSV with a header row (``#`` lines are comments)."""
    import csv

    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: file not found")
    with open(path, newline="") as fh:
        lines = [ln for ln in fh if ln.strip() and not ln.lstrip().startswith("#")]
    reader = csv.reader(lines)
    header = [h.strip() for h in next(reader, [])]
    missing = [c for c in columns if c not in header]
    if missing:
        raise ValueError(f"{path}: missing column {missing[0]!r} (need {', '.join(columns)})")
    rows = list(reader)
    out = {}
    for c in columns:
        i = header.index(c)
        try:
            out[c] = np.array([float(r[i]) for r in rows])
        except (ValueError, IndexError):
            raise ValueError(f"{path}: column {c!r} has a missing or non-numeric value") from None
        if not np.all(np.isfinite(out[c])):
            raise ValueError(f"{path}: column {c!r} has a non-finite value")
    return out

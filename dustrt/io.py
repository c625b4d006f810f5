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


def check_output_path(path: str | Path, what: str = "output") -> Path:
    """Fail early, naming the path, if an output file cannot be created there."""
    path = Path(path)
    if path.is_dir():
        raise ValueError(f"{what} {path}: is a directory")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise ValueError(f"{what} {path}: directory {parent} does not exist")
    if not os.access(parent, os.W_OK):
        raise ValueError(f"{what} {path}: directory {parent} is not writable")
    return path


def _temporary_beside(path: Path, suffix: str) -> str:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; a product file follows the umask
    return tmp


def write_netcdf(ds: xr.Dataset, path: str | Path) -> Path:
    """Write ``ds`` atomically to ``path`` (temporary file + rename)."""
    path = check_output_path(path)
    tmp = _temporary_beside(path, ".tmp")
    try:
        ds.to_netcdf(tmp, engine=ENGINE, encoding=_encoding(ds))
        os.replace(tmp, path)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise ValueError(f"output {path}: cannot be written ({exc.strerror or exc})") from None
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


def check_figure_format(path: str | Path) -> str:
    """The figure format named by the file's suffix; ValueError naming the file if matplotlib lacks it."""
    from matplotlib.backend_bases import FigureCanvasBase

    path = Path(path)
    fmt = path.suffix.lstrip(".").lower()
    supported = FigureCanvasBase.get_supported_filetypes()
    if fmt not in supported:
        raise ValueError(f"plot {path}: unsupported format {fmt!r}; use one of {', '.join(sorted(supported))}")
    return fmt


def render_figure(fig, path: str | Path) -> str:
    """Render a figure to a temporary file beside ``path``; :func:`commit` or discard it later."""
    import matplotlib.pyplot as plt

    path = check_output_path(path, "plot")
    try:
        fmt = check_figure_format(path)
    except ValueError:
        plt.close(fig)
        raise
    tmp = _temporary_beside(path, "." + fmt)
    try:
        fig.savefig(tmp, dpi=120, bbox_inches="tight", format=fmt)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    finally:
        plt.close(fig)
    return tmp


def commit(tmp: str, path: str | Path) -> Path:
    os.replace(tmp, path)
    return Path(path)


def save_figure(fig, path: str | Path) -> Path:
    """Save a matplotlib figure atomically."""
    return commit(render_figure(fig, path), path)


def read_csv_table(path: str | Path, columns: tuple[str, ...] | None = None) -> dict[str, np.ndarray]:
    """Read numeric columns (all, or the named ones) from a CSV with a header row.

    ``#`` lines are comments.  Errors name the file and the column.
    """
    import csv

    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: file not found")
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            lines = [ln for ln in fh if ln.strip() and not ln.lstrip().startswith("#")]
    except UnicodeDecodeError as exc:
        raise ValueError(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    reader = csv.reader(lines)
    try:
        header = [h.strip() for h in next(reader, [])]
        rows = list(reader)
    except csv.Error as exc:
        raise ValueError(f"{path}: not a readable CSV table ({exc})") from None
    columns = tuple(header) if columns is None else tuple(columns)
    missing = [c for c in columns if c not in header]
    if missing:
        raise ValueError(f"{path}: missing column {missing[0]!r} (need {', '.join(columns)})")
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


def write_text(text: str, path: str | Path) -> Path:
    """Write a UTF-8 text file atomically (temporary file + rename)."""
    path = check_output_path(path)
    tmp = _temporary_beside(path, ".tmp")
    try:
        Path(tmp).write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path

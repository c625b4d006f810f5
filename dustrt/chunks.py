"""Chunked, resumable evaluation of a function over a flat parameter grid.

A sweep evaluates a pure physics function on every point of a grid that the
caller has flattened to ``range(n_points)``.  This module owns only the
machinery: it cuts the grid into contiguous chunks, runs them serially, on a
private local dask cluster or on an existing dask scheduler, writes each
finished chunk to a checkpoint file as soon as it arrives, and can resume an
interrupted sweep without recomputing anything already on disk.

The physics is supplied as ``compute_chunk(spec, indices) -> dict`` where
``spec`` is any picklable object, ``indices`` a 1-D ``int64`` array of flat
grid indices (contiguous, ascending) and every returned array has first
dimension ``len(indices)`` (further dimensions, e.g. wavelength, allowed).
The function must be importable by worker processes (module-level, no
closures over unpicklable state).

Checkpoint directory layout::

    manifest.json        fingerprint, n_points, chunk_size, chunk boundaries
    chunk_000000.npz     results of chunk 0 (uncompressed npz, dtypes kept)
    chunk_000001.npz     ...

Every file is written to a temporary file in the same directory and renamed
into place (``os.replace``), so a crash never leaves a half-written chunk
under its final name.  Arrays are stored with their own dtype, so results
are bit-identical whatever the chunking or executor.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
import sys
import tempfile
import zipfile
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "ChunkError",
    "run_chunked",
    "completed_chunks",
    "remove_checkpoints",
    "chunk_bounds",
    "MANIFEST_NAME",
]

#: Name of the manifest file inside a checkpoint directory.
MANIFEST_NAME = "manifest.json"
#: How to discard unusable checkpoints (API and command line).
START_OVER = "start over without resume (dustrt sweep: --overwrite instead of --resume)"
_FORMAT = "dustrt-chunked-sweep"
_FORMAT_VERSION = 1
_CHUNK_RE = re.compile(r"^chunk_(\d{6,})\.npz$")
# Temporary files we create: ".<final name>.<random>.tmp".
_TMP_RE = re.compile(r"^\.(chunk_\d{6,}\.npz|manifest\.json)\..*\.tmp$")
# Internal npz member names; user keys are stored in "names" so any str key
# (even "file" or "allow_pickle", which np.savez reserves) round-trips.
_NAMES_MEMBER = "names"


class ChunkError(RuntimeError):
    """A chunk's computation raised; the original exception is ``__cause__``.

    Attributes
    ----------
    chunk_index : int
        Index of the failed chunk.
    start, stop : int
        Flat grid indices covered by the chunk, ``range(start, stop)``.
    checkpoint_dir : pathlib.Path
        Directory holding the chunks that did finish.
    """

    def __init__(self, chunk_index: int, start: int, stop: int, checkpoint_dir: Path, exc: BaseException):
        self.chunk_index = chunk_index
        self.start = start
        self.stop = stop
        self.checkpoint_dir = checkpoint_dir
        super().__init__(
            f"chunk {chunk_index} (grid points {start}..{stop - 1}) failed: "
            f"{type(exc).__name__}: {exc}. Finished chunks are kept in '{checkpoint_dir}'; "
            "rerun with resume=True to compute only the missing ones."
        )


# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------


def _chunk_name(i: int) -> str:
    return f"chunk_{i:06d}.npz"


def chunk_bounds(n_points: int, chunk_size: int) -> list[tuple[int, int]]:
    """Contiguous chunk boundaries ``[(start, stop), ...]`` covering ``range(n_points)``.

    Parameters
    ----------
    n_points : int
        Number of grid points [-], >= 1.
    chunk_size : int
        Points per chunk [-], >= 1; the last chunk may be shorter.
    """
    n_points = _positive_int(n_points, "n_points")
    chunk_size = _positive_int(chunk_size, "chunk_size")
    return [(s, min(s + chunk_size, n_points)) for s in range(0, n_points, chunk_size)]


def _positive_int(value: Any, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise ValueError(f"{name} must be an integer >= 1, got {value!r}")
    return int(value)


def _atomic_write(path: Path, write: Callable[[Any], None], mode: str) -> None:
    """Write via ``write(fh)`` to a temporary file beside ``path``, then rename."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, mode) as fh:
            write(fh)
            fh.flush()
            # fsync so that the rename never exposes a file whose data is
            # still only in the page cache when the machine goes down.
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _save_chunk(checkpoint_dir: Path, i: int, arrays: dict[str, np.ndarray]) -> None:
    names = list(arrays)
    members = {f"v{j}": arrays[k] for j, k in enumerate(names)}
    members[_NAMES_MEMBER] = np.array(names, dtype=str)
    # Uncompressed: float64 physics output hardly compresses and speed matters.
    _atomic_write(checkpoint_dir / _chunk_name(i), lambda fh: np.savez(fh, **members), "wb")


def _load_chunk(checkpoint_dir: Path, i: int, length: int) -> dict[str, np.ndarray] | None:
    """Load chunk ``i``; None when the file is unreadable or has the wrong length."""
    path = checkpoint_dir / _chunk_name(i)
    try:
        with np.load(path, allow_pickle=False) as npz:
            names = [str(k) for k in npz[_NAMES_MEMBER]]
            arrays = {k: npz[f"v{j}"] for j, k in enumerate(names)}
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    if any(a.ndim == 0 or a.shape[0] != length for a in arrays.values()):
        return None
    return arrays


def _check_result(result: Any, i: int, length: int) -> dict[str, np.ndarray]:
    """Validate one chunk's output and convert values to ndarrays (no copy, no cast)."""
    if not isinstance(result, Mapping) or not result:
        raise ValueError(
            f"chunk {i}: compute_chunk must return a non-empty dict of arrays, got {type(result).__name__}"
        )
    out = {}
    for key, value in result.items():
        if not isinstance(key, str):
            raise ValueError(f"chunk {i}: result keys must be str, got {key!r}")
        arr = np.asarray(value)
        if arr.dtype.hasobject:
            raise ValueError(f"chunk {i}: result {key!r} has object dtype; only numeric/str arrays are stored")
        if arr.ndim == 0 or arr.shape[0] != length:
            raise ValueError(
                f"chunk {i}: result {key!r} has shape {arr.shape}; its first dimension must be "
                f"the number of indices in the chunk ({length})"
            )
        out[key] = arr
    return out


def _read_manifest(checkpoint_dir: Path) -> dict | None:
    path = checkpoint_dir / MANIFEST_NAME
    if not path.is_file():
        return None
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise ValueError(f"checkpoint manifest '{path}' cannot be read ({exc}); {START_OVER}") from None
    if not isinstance(manifest, dict) or manifest.get("format") != _FORMAT:
        raise ValueError(f"'{path}' is not a dustrt sweep checkpoint manifest; {START_OVER}")
    return manifest


def _write_manifest(checkpoint_dir: Path, fingerprint: str, n_points: int, chunk_size: int) -> None:
    manifest = {
        "format": _FORMAT,
        "format_version": _FORMAT_VERSION,
        "fingerprint": fingerprint,
        "n_points": n_points,
        "chunk_size": chunk_size,
        "chunk_bounds": [list(b) for b in chunk_bounds(n_points, chunk_size)],
    }
    text = json.dumps(manifest, indent=1) + "\n"
    _atomic_write(checkpoint_dir / MANIFEST_NAME, lambda fh: fh.write(text), "w")


def _clear(checkpoint_dir: Path) -> None:
    """Remove our own files (chunks, manifest, temporaries); never anything else."""
    if not checkpoint_dir.is_dir():
        return
    for entry in checkpoint_dir.iterdir():
        if entry.is_file() and (
            _CHUNK_RE.match(entry.name) or _TMP_RE.match(entry.name) or entry.name == MANIFEST_NAME
        ):
            entry.unlink(missing_ok=True)


def _clear_tmp(checkpoint_dir: Path) -> None:
    for entry in checkpoint_dir.iterdir():
        if entry.is_file() and _TMP_RE.match(entry.name):
            entry.unlink(missing_ok=True)


def completed_chunks(checkpoint_dir: str | os.PathLike) -> set[int]:
    """Indices of the chunk files present in ``checkpoint_dir`` (empty if it does not exist).

    Parameters
    ----------
    checkpoint_dir : str or path-like
        Checkpoint directory of a sweep.
    """
    checkpoint_dir = Path(checkpoint_dir)
    if not checkpoint_dir.is_dir():
        return set()
    return {int(m.group(1)) for e in checkpoint_dir.iterdir() if (m := _CHUNK_RE.match(e.name))}


def remove_checkpoints(checkpoint_dir: str | os.PathLike) -> bool:
    """Delete a sweep's checkpoint files, then the directory if nothing else is in it.

    Only files this module writes are removed, so pointing ``checkpoint_dir``
    at a folder with other content by mistake loses nothing else.

    Parameters
    ----------
    checkpoint_dir : str or path-like
        Checkpoint directory of a sweep.

    Returns
    -------
    bool
        True when the directory is gone afterwards (or never existed).
    """
    checkpoint_dir = Path(checkpoint_dir)
    if not checkpoint_dir.exists():
        return True
    _clear(checkpoint_dir)
    try:
        checkpoint_dir.rmdir()
    except OSError:
        return False
    return True


# --------------------------------------------------------------------------
# executors
# --------------------------------------------------------------------------


def _parallelism(client) -> int:
    # Total worker threads is the useful measure for an external cluster.
    return max(1, sum(client.nthreads().values()))


def _run_serial(compute_chunk, spec, todo, bounds, on_done):
    for i in todo:
        start, stop = bounds[i]
        try:
            result = compute_chunk(spec, np.arange(start, stop, dtype=np.int64))
        except Exception as exc:
            raise _ChunkFailed(i, exc) from exc
        on_done(i, result)


def _run_dask(client, compute_chunk, spec, todo, bounds, on_done):
    from distributed import as_completed

    # Ship the spec once per worker instead of once per task.  Wrapped in a
    # list because scatter would otherwise split a dict/list spec apart.
    [spec_future] = client.scatter([spec], broadcast=True, hash=False)
    futures = {}
    for i in todo:
        start, stop = bounds[i]
        fut = client.submit(compute_chunk, spec_future, np.arange(start, stop, dtype=np.int64), pure=False)
        futures[fut] = i
    done: set[int] = set()
    for fut in as_completed(futures):
        i = futures[fut]
        try:
            result = fut.result()
        except Exception as exc:
            # Keep every chunk that already finished elsewhere, drop the rest.
            for other, j in futures.items():
                if j not in done and other.status == "finished":
                    on_done(j, other.result())
                    done.add(j)
            client.cancel([f for f in futures if not f.done()])
            raise _ChunkFailed(i, exc) from exc
        on_done(i, result)
        done.add(i)


class _ChunkFailed(Exception):
    def __init__(self, i: int, exc: BaseException):
        super().__init__(i)
        self.i = i
        self.exc = exc


# --------------------------------------------------------------------------
# public entry point
# --------------------------------------------------------------------------


def run_chunked(
    compute_chunk: Callable[[Any, np.ndarray], Mapping[str, np.ndarray]],
    spec: Any,
    n_points: int,
    checkpoint_dir: str | os.PathLike,
    *,
    chunk_size: int | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
    resume: bool = False,
    progress: bool = True,
    fingerprint: str,
) -> dict[str, np.ndarray]:
    """Evaluate ``compute_chunk`` over ``range(n_points)`` in checkpointed chunks.

    Parameters
    ----------
    compute_chunk : callable
        Pure, picklable ``compute_chunk(spec, indices) -> dict[str, ndarray]``;
        ``indices`` is a 1-D int64 array of flat grid indices and every
        returned array has first dimension ``len(indices)``.
    spec : object
        Picklable description of the sweep, passed unchanged to every call.
    n_points : int
        Number of grid points [-], >= 1.
    checkpoint_dir : str or path-like
        Directory for ``manifest.json`` and ``chunk_NNNNNN.npz`` files;
        created if missing.
    chunk_size : int, optional
        Grid points per chunk [-], >= 1.  Default: serial
        ``max(1, n_points // 20)``; on dask ``ceil(n_points / (4 * W))`` with
        W the number of workers (threads on an external cluster).  When
        resuming and ``chunk_size`` is None, the checkpoint's chunk size is
        used, so a resume may use a different number of workers.
    scheduler : str, optional
        Address of a running dask scheduler (``"tcp://host:port"``).  Only
        the client is closed afterwards, never the cluster.
    workers : int, optional
        Start a private ``LocalCluster`` with this many single-threaded
        worker processes [-], >= 1; closed on return.  Give at most one of
        ``scheduler`` and ``workers``; with neither, chunks run serially in
        this process.
    resume : bool
        Reuse finished chunks from ``checkpoint_dir`` when its manifest has
        the same ``fingerprint``, ``n_points`` and ``chunk_size``; a
        mismatch raises ValueError.  Without a manifest the sweep starts
        fresh.  With ``resume=False`` old checkpoint files are deleted first.
    progress : bool
        Show a tqdm progress bar over chunks on stderr.
    fingerprint : str
        Identifies the sweep (e.g. a hash of the scenario and grid); stored
        in the manifest and compared on resume.

    Returns
    -------
    dict[str, numpy.ndarray]
        Each result array concatenated over all chunks in grid order (first
        dimension ``n_points``), with the dtype ``compute_chunk`` returned.

    Raises
    ------
    ChunkError
        ``compute_chunk`` raised on a chunk; the message names the chunk, the
        original exception is chained, and finished chunks stay on disk.
    ValueError
        Invalid arguments, a checkpoint that belongs to another sweep, or
        results of the wrong shape or inconsistent across chunks.
    """
    if not callable(compute_chunk):
        raise ValueError("compute_chunk must be callable")
    n_points = _positive_int(n_points, "n_points")
    if chunk_size is not None:
        chunk_size = _positive_int(chunk_size, "chunk_size")
    if workers is not None:
        workers = _positive_int(workers, "workers")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler):
        raise ValueError(f"scheduler must be a non-empty address string such as 'tcp://host:8786', got {scheduler!r}")
    if scheduler is not None and workers is not None:
        raise ValueError("give at most one of scheduler (an existing cluster) and workers (a local cluster)")
    if not isinstance(fingerprint, str) or not fingerprint:
        raise ValueError(f"fingerprint must be a non-empty string, got {fingerprint!r}")
    checkpoint_dir = Path(checkpoint_dir)
    if checkpoint_dir.exists() and not checkpoint_dir.is_dir():
        raise ValueError(f"checkpoint_dir '{checkpoint_dir}' exists and is not a directory")

    # Decide resume vs fresh before starting any cluster, so a mismatch fails fast.
    manifest = _read_manifest(checkpoint_dir) if resume else None
    if manifest is not None:
        problems = []
        if manifest.get("fingerprint") != fingerprint:
            problems.append(f"fingerprint {manifest.get('fingerprint')!r} != {fingerprint!r}")
        if manifest.get("n_points") != n_points:
            problems.append(f"n_points {manifest.get('n_points')!r} != {n_points}")
        if chunk_size is not None and manifest.get("chunk_size") != chunk_size:
            problems.append(f"chunk_size {manifest.get('chunk_size')!r} != {chunk_size}")
        if problems:
            raise ValueError(
                f"checkpoint directory '{checkpoint_dir}' belongs to another sweep ("
                + "; ".join(problems)
                + f"); {START_OVER}, or choose another output"
            )
        chunk_size = _positive_int(manifest.get("chunk_size"), f"chunk_size in '{checkpoint_dir / MANIFEST_NAME}'")

    with contextlib.ExitStack() as stack:
        client = None

        def open_client():
            from distributed import Client, LocalCluster

            if scheduler is not None:
                return stack.enter_context(Client(scheduler))
            # Enter the cluster first so that the client is closed before it.
            cluster = stack.enter_context(
                LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None)
            )
            return stack.enter_context(Client(cluster))

        if chunk_size is None:
            if scheduler is not None:
                client = open_client()
                n_par = _parallelism(client)
            else:
                n_par = workers
            chunk_size = max(1, n_points // 20) if n_par is None else max(1, math.ceil(n_points / (4 * n_par)))

        bounds = chunk_bounds(n_points, chunk_size)
        if manifest is not None and manifest.get("chunk_bounds") != [list(b) for b in bounds]:
            raise ValueError(
                f"checkpoint directory '{checkpoint_dir}' has inconsistent chunk boundaries in its manifest; "
                + START_OVER
            )

        results: dict[int, dict[str, np.ndarray]] = {}
        if manifest is not None:
            _clear_tmp(checkpoint_dir)
            for i in sorted(completed_chunks(checkpoint_dir)):
                if i < len(bounds):
                    loaded = _load_chunk(checkpoint_dir, i, bounds[i][1] - bounds[i][0])
                    if loaded is not None:  # unreadable or wrong length: recompute
                        results[i] = loaded
        else:
            checkpoint_dir.mkdir(parents=True, exist_ok=True)
            _clear(checkpoint_dir)
            _write_manifest(checkpoint_dir, fingerprint, n_points, chunk_size)
        todo = [i for i in range(len(bounds)) if i not in results]

        from tqdm import tqdm

        bar = stack.enter_context(
            tqdm(
                total=len(bounds),
                initial=len(results),
                unit="chunk",
                desc="sweep",
                file=sys.stderr,
                disable=not progress,
            )
        )

        def on_done(i: int, result: Any) -> None:
            start, stop = bounds[i]
            arrays = _check_result(result, i, stop - start)
            _save_chunk(checkpoint_dir, i, arrays)
            results[i] = arrays
            bar.update(1)

        try:
            if todo and scheduler is None and workers is None:
                _run_serial(compute_chunk, spec, todo, bounds, on_done)
            elif todo:
                if client is None:
                    client = open_client()
                _run_dask(client, compute_chunk, spec, todo, bounds, on_done)
        except _ChunkFailed as failed:
            start, stop = bounds[failed.i]
            raise ChunkError(failed.i, start, stop, checkpoint_dir, failed.exc) from failed.exc

    return _assemble(results, len(bounds))


def _assemble(results: dict[int, dict[str, np.ndarray]], n_chunks: int) -> dict[str, np.ndarray]:
    """Concatenate chunk results in grid order; insist on identical keys, dtypes, trailing shapes."""
    first = results[0]
    for i in range(1, n_chunks):
        chunk = results[i]
        if set(chunk) != set(first):
            raise ValueError(f"chunk {i}: result keys {sorted(chunk)} differ from chunk 0's {sorted(first)}")
        for key, arr in chunk.items():
            ref = first[key]
            # np.concatenate would silently promote dtypes; refuse instead.
            if arr.dtype != ref.dtype or arr.shape[1:] != ref.shape[1:]:
                raise ValueError(
                    f"chunk {i}: result {key!r} has dtype {arr.dtype} and trailing shape {arr.shape[1:]}, "
                    f"chunk 0 has {ref.dtype} and {ref.shape[1:]}"
                )
    return {key: np.concatenate([results[i][key] for i in range(n_chunks)]) for key in first}

"""Machine description and atomic JSON results for the validation scripts (no dustrt physics)."""

from __future__ import annotations

import datetime as _dt
import json
import os
import platform
import sys
from pathlib import Path

RESULTS_DIR = Path(__file__).resolve().parent / "results"


def cpu_model() -> str:
    """CPU model name from /proc/cpuinfo (Linux), else platform.processor()."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine() or "unknown"


def cpu_count() -> int:
    """CPUs this process may use (affinity), else the machine's count."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 0


def machine_description() -> dict:
    """CPU, cores, OS and the versions that matter for speed and results."""
    import numba
    import numpy

    import dustrt

    return {
        "cpu": cpu_model(),
        "cores": cpu_count(),
        "platform": platform.platform(),
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "numba": numba.__version__,
        "dustrt": dustrt.__version__,
    }


def now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def atomic_write_text(path: Path, text: str) -> None:
    """Write text to ``path`` through a temporary file in the same folder and os.replace."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def write_bench_json(name: str, ratio: float, ratio_description: str, timings_s: dict, max_difference: dict,
                     extra: dict | None = None, results_dir: Path = RESULTS_DIR) -> Path:
    """Write ``results/<name>.json``: speed ratio, timings, largest differences, machine, date."""
    payload = {
        "name": name,
        "date": now_utc(),
        "ratio": float(ratio),
        "ratio_description": ratio_description,
        "timings_s": {k: float(v) for k, v in timings_s.items()},
        "max_difference": {k: float(v) for k, v in max_difference.items()},
        "machine": machine_description(),
        "command": " ".join([Path(sys.argv[0]).name, *sys.argv[1:]]),
    }
    if extra:
        payload.update(extra)
    path = Path(results_dir) / f"{name}.json"
    atomic_write_text(path, json.dumps(payload, indent=2, sort_keys=False) + "\n")
    return path

"""Tests for dustrt.chunks: chunked, checkpointed, resumable grid evaluation.

No physics here, so no outside reference values: the reference is the same
deterministic function evaluated directly on the whole grid, and results
must match it bit for bit whatever the chunking or executor.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from dustrt import chunks


# Module-level so that it pickles by reference to dask worker processes.
def toy_compute(spec, indices):
    """A deterministic per-point function with 1-D, 3-D and integer outputs."""
    x = indices.astype(np.float64) * spec["scale"]
    table = np.sin(x[:, None, None] * np.arange(1.0, 7.0).reshape(1, 2, 3))
    return {"value": np.sin(x), "table": table, "index": indices.copy()}


def spy_compute(spec, indices):
    """toy_compute that fails on spec['fail_at'] while the marker file exists
    and logs every index it computes."""
    if spec["fail_at"] in indices and Path(spec["marker"]).exists():
        raise RuntimeError("injected failure")
    with open(spec["log"], "a") as fh:
        fh.write("".join(f"{i}\n" for i in indices))
    return toy_compute(spec, indices)


def bad_length_compute(spec, indices):
    return {"value": np.zeros(len(indices) + 1)}


def direct(n_points, scale=0.37):
    """The whole grid in one call: the reference every run must reproduce."""
    return toy_compute({"scale": scale}, np.arange(n_points, dtype=np.int64))


def assert_bit_identical(got, expected):
    assert list(got) == list(expected)
    for key in expected:
        assert got[key].dtype == expected[key].dtype, key
        assert got[key].shape == expected[key].shape, key
        assert got[key].tobytes() == expected[key].tobytes(), key


def logged(path):
    return [int(s) for s in Path(path).read_text().split()] if Path(path).exists() else []


def no_tmp_files(directory):
    return not any(p.name.endswith(".tmp") for p in Path(directory).iterdir())


def spy_spec(tmp_path, fail_at):
    marker = tmp_path / "fail.marker"
    marker.touch()
    return {"scale": 0.37, "fail_at": fail_at, "marker": str(marker), "log": str(tmp_path / "log.txt")}


@pytest.mark.parametrize("chunk_size", [None, 1, 3, 7, 23, 100])
def test_serial_equals_direct_for_any_chunk_size(tmp_path, chunk_size):
    n = 23
    got = chunks.run_chunked(
        toy_compute, {"scale": 0.37}, n, tmp_path / "ck", chunk_size=chunk_size, progress=False, fingerprint="a"
    )
    assert_bit_identical(got, direct(n))
    n_chunks = len(chunks.chunk_bounds(n, chunk_size or max(1, n // 20)))
    assert chunks.completed_chunks(tmp_path / "ck") == set(range(n_chunks))
    assert no_tmp_files(tmp_path / "ck")


def test_manifest_and_default_chunk_size(tmp_path):
    chunks.run_chunked(toy_compute, {"scale": 0.37}, 45, tmp_path, progress=False, fingerprint="fp1")
    manifest = json.loads((tmp_path / chunks.MANIFEST_NAME).read_text())
    # Serial default: max(1, n_points // 20) = 2 -> 23 chunks, the last one short.
    assert manifest["fingerprint"] == "fp1"
    assert manifest["n_points"] == 45
    assert manifest["chunk_size"] == 2
    assert manifest["chunk_bounds"][0] == [0, 2]
    assert manifest["chunk_bounds"][-1] == [44, 45]
    assert len(manifest["chunk_bounds"]) == 23
    assert chunks.chunk_bounds(10, 4) == [(0, 4), (4, 8), (8, 10)]
    # resume=True without a checkpoint simply starts a fresh sweep.
    got = chunks.run_chunked(
        toy_compute, {"scale": 0.37}, 5, tmp_path / "new", resume=True, progress=False, fingerprint="fp2"
    )
    assert_bit_identical(got, direct(5))


def test_kill_and_resume_recomputes_nothing_finished(tmp_path):
    n, ck = 23, tmp_path / "ck"
    spec = spy_spec(tmp_path, fail_at=13)  # chunk 3 of [0,4) [4,8) ... [20,23)
    with pytest.raises(chunks.ChunkError, match=r"chunk 3 \(grid points 12\.\.15\)") as info:
        chunks.run_chunked(spy_compute, spec, n, ck, chunk_size=4, progress=False, fingerprint="s")
    assert isinstance(info.value.__cause__, RuntimeError)
    assert info.value.chunk_index == 3
    assert chunks.completed_chunks(ck) == {0, 1, 2}
    assert logged(spec["log"]) == list(range(12))
    assert no_tmp_files(ck)

    # Rerun with resume; chunk_size omitted, so the checkpoint's size is adopted.
    Path(spec["marker"]).unlink()
    Path(spec["log"]).unlink()
    got = chunks.run_chunked(spy_compute, spec, n, ck, resume=True, progress=False, fingerprint="s")
    assert logged(spec["log"]) == list(range(12, n))
    assert_bit_identical(got, direct(n))
    assert chunks.completed_chunks(ck) == set(range(6))

    # A finished sweep resumes without computing anything.
    Path(spec["log"]).unlink()
    again = chunks.run_chunked(spy_compute, spec, n, ck, resume=True, progress=False, fingerprint="s")
    assert logged(spec["log"]) == []
    assert_bit_identical(again, direct(n))


def test_resume_recomputes_damaged_chunk_and_clears_stale_temporaries(tmp_path):
    n = 10
    spec = spy_spec(tmp_path, fail_at=-1)
    chunks.run_chunked(spy_compute, spec, n, tmp_path, chunk_size=4, progress=False, fingerprint="s")
    (tmp_path / "chunk_000001.npz").write_bytes(b"not a zip archive")
    stale = tmp_path / ".chunk_000002.npz.abc123.tmp"
    stale.write_bytes(b"left by a killed run")
    Path(spec["log"]).unlink()
    got = chunks.run_chunked(spy_compute, spec, n, tmp_path, resume=True, progress=False, fingerprint="s")
    assert logged(spec["log"]) == [4, 5, 6, 7]
    assert_bit_identical(got, direct(n))
    assert not stale.exists()


def test_resume_of_another_sweep_raises_naming_directory(tmp_path):
    ck = tmp_path / "sweep_ck"
    chunks.run_chunked(toy_compute, {"scale": 0.37}, 12, ck, chunk_size=3, progress=False, fingerprint="one")
    where = re.escape(str(ck))
    for kwargs in (
        dict(n_points=12, fingerprint="two"),
        dict(n_points=13, fingerprint="one"),
        dict(n_points=12, fingerprint="one", chunk_size=4),
    ):
        with pytest.raises(ValueError, match=f"'{where}' belongs to another sweep"):
            chunks.run_chunked(toy_compute, {"scale": 0.37}, checkpoint_dir=ck, resume=True, progress=False, **kwargs)
    # The failed resumes touched nothing.
    assert chunks.completed_chunks(ck) == {0, 1, 2, 3}


def test_fresh_run_clears_old_chunks_but_nothing_else(tmp_path):
    chunks.run_chunked(toy_compute, {"scale": 0.37}, 10, tmp_path, chunk_size=2, progress=False, fingerprint="x")
    assert chunks.completed_chunks(tmp_path) == set(range(5))
    foreign = tmp_path / "notes.txt"
    foreign.write_text("keep me")
    got = chunks.run_chunked(
        toy_compute, {"scale": 0.37}, 10, tmp_path, chunk_size=5, resume=False, progress=False, fingerprint="x"
    )
    assert_bit_identical(got, direct(10))
    assert chunks.completed_chunks(tmp_path) == {0, 1}
    # remove_checkpoints deletes only its own files; the folder goes once empty.
    assert chunks.remove_checkpoints(tmp_path) is False
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]
    foreign.unlink()
    assert chunks.remove_checkpoints(tmp_path) is True
    assert not tmp_path.exists()


def test_progress_bar_goes_to_stderr(tmp_path, capsys):
    chunks.run_chunked(toy_compute, {"scale": 0.37}, 6, tmp_path, chunk_size=2, progress=True, fingerprint="p")
    out, err = capsys.readouterr()
    assert out == ""
    assert "3/3" in err


def test_bad_result_shape_names_chunk(tmp_path):
    with pytest.raises(ValueError, match=r"chunk 0: result 'value' has shape \(4,\)"):
        chunks.run_chunked(bad_length_compute, None, 6, tmp_path, chunk_size=3, progress=False, fingerprint="b")


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(n_points=0), "n_points must be an integer >= 1"),
        (dict(chunk_size=0), "chunk_size must be an integer >= 1"),
        (dict(workers=0), "workers must be an integer >= 1"),
        (dict(workers=2, scheduler="tcp://127.0.0.1:1"), "at most one of scheduler"),
        (dict(fingerprint=""), "fingerprint must be a non-empty string"),
    ],
)
def test_invalid_arguments(tmp_path, kwargs, message):
    args = dict(n_points=5, fingerprint="f", progress=False) | kwargs
    with pytest.raises(ValueError, match=message):
        chunks.run_chunked(toy_compute, {"scale": 0.37}, checkpoint_dir=tmp_path, **args)


def test_two_worker_local_cluster_matches_serial(tmp_path):
    n = 13
    serial = chunks.run_chunked(toy_compute, {"scale": 0.37}, n, tmp_path / "s", progress=False, fingerprint="c")
    dist = chunks.run_chunked(toy_compute, {"scale": 0.37}, n, tmp_path / "d", workers=2, progress=False, fingerprint="c")
    assert_bit_identical(dist, serial)
    # Default on a cluster: ceil(n / (4 * workers)) = ceil(13 / 8) = 2.
    assert json.loads((tmp_path / "d" / chunks.MANIFEST_NAME).read_text())["chunk_size"] == 2
    assert chunks.completed_chunks(tmp_path / "d") == set(range(7))
    assert no_tmp_files(tmp_path / "d")


def test_existing_scheduler_failure_resume_and_cluster_left_running(tmp_path):
    # An in-process cluster keeps this cheap; run_chunked reaches it by address,
    # exactly as it would a remote scheduler.
    from distributed import Client, LocalCluster

    n, ck = 24, tmp_path / "ck"
    spec = spy_spec(tmp_path, fail_at=13)  # chunk 3 with chunk_size=4
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None) as cluster:
        address = cluster.scheduler_address
        with pytest.raises(chunks.ChunkError, match="chunk 3 ") as info:
            chunks.run_chunked(spy_compute, spec, n, ck, chunk_size=4, scheduler=address, progress=False, fingerprint="r")
        assert isinstance(info.value.__cause__, RuntimeError)
        finished = chunks.completed_chunks(ck)
        assert 3 not in finished
        assert no_tmp_files(ck)

        Path(spec["marker"]).unlink()
        Path(spec["log"]).unlink(missing_ok=True)
        got = chunks.run_chunked(spy_compute, spec, n, ck, scheduler=address, resume=True, progress=False, fingerprint="r")
        recomputed = {i // 4 for i in logged(spec["log"])}
        assert recomputed == set(range(6)) - finished
        assert_bit_identical(got, direct(n))

        # Only the client was closed: the cluster still takes work.
        with Client(cluster) as client:
            assert client.submit(sum, [1, 2], pure=False).result() == 3

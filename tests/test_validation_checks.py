"""Every check of the validation registry (validation/checks.py) passes, and the report writer works.

The registry compares dustrt with published tables, analytic results and textbook statistics;
each check names its sources (see validation/REPORT.md for the table). Here every check is one
test, so a failing comparison names itself.
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import re

import pytest

VALIDATION = Path(__file__).resolve().parents[1] / "validation"
if str(VALIDATION) not in sys.path:
    sys.path.insert(0, str(VALIDATION))

import checks  # noqa: E402
import run as report_run  # noqa: E402

from dustrt import DustrtWarning  # noqa: E402


@pytest.mark.parametrize("name", list(checks.REGISTRY), ids=list(checks.REGISTRY))
def test_validation_check_passes(name):
    with warnings.catch_warnings():
        warnings.simplefilter("error", DustrtWarning)  # a check must not run into dustrt's edge cases
        rows = checks.REGISTRY[name].func()
    assert rows, f"check {name} returned no comparisons"
    assert checks.REGISTRY[name].kind in checks.CHECK_KINDS
    for r in rows:
        assert r.provenance in checks.PROVENANCE_FLAGS
        assert r.source and r.quantity
        assert r.difference_kind in ("rel", "abs")
        assert r.tolerance_basis, f"{r.quantity}: the tolerance needs a stated basis"
        _assert_cites_only_repository_files(f"{r.quantity} {r.source} {r.tolerance_basis}")
    failed = [f"{r.quantity}: ref {r.reference}, dustrt {r.value}, diff {r.difference:.3g} > tol {r.tolerance:.3g} "
              f"({r.difference_kind}; {r.source})" for r in rows if not r.passed]
    assert not failed, "\n".join(failed)


REPO = Path(__file__).resolve().parents[1]


def _assert_cites_only_repository_files(text):
    # A row may cite a file only if it is in the repository (no shared reference notes).
    for name in ("CHECK_VALUES", "DESIGN.md"):
        assert name not in text, f"row cites {name}, which is not in the repository: {text}"
    for path in re.findall(r"[\w./-]+\.(?:md|py|csv)\b", text):
        assert (REPO / path).is_file(), f"row cites {path}, not found in the repository"


def test_group_notes_cite_only_repository_files():
    for text in checks.GROUP_NOTES.values():
        _assert_cites_only_repository_files(text)


def test_report_writer_one_row_per_comparison(tmp_path, capsys):
    results_dir = tmp_path / "results"  # no benchmark results: the speed table says so
    status = report_run.main(["--output-dir", str(tmp_path), "--no-figures", "--results-dir", str(results_dir)])
    assert status == 0
    text = (tmp_path / "REPORT.md").read_text(encoding="utf-8")
    header = ("| quantity | source | reference | dustrt | difference | tolerance | tolerance basis | result | "
              "provenance |")
    assert header in text
    n_rows = sum(len(c.func()) for c in checks.REGISTRY.values())
    table_rows = [ln for ln in text.splitlines() if ln.startswith("| ") and ln.rstrip().endswith(
        tuple(f"| {p} |" for p in checks.PROVENANCE_FLAGS))]
    assert len(table_rows) == n_rows
    assert sum(" | pass | " in ln for ln in table_rows) == n_rows
    assert "dustrt" in text and "numba" in text and "cores" in text
    assert "## Speed" in text and "not run yet" in text
    assert "What this report does not validate" in text
    # implementation checks come after, and apart from, the comparisons with the outside world
    ext, impl = (text.index(f"## {checks_title}") for checks_title in (
        report_run.SECTIONS[checks.EXTERNAL][0], report_run.SECTIONS[checks.IMPLEMENTATION][0]))
    assert ext < impl < text.index("## Speed")
    impl_text = text[impl:text.index("## Speed")]
    for c in checks.REGISTRY.values():
        first = c.func()[0].quantity
        in_impl = any(ln.startswith("| " + first.replace("|", "\\|")) for ln in impl_text.splitlines())
        assert in_impl == (c.kind == checks.IMPLEMENTATION), c.name
    assert not list(tmp_path.glob(".*.tmp"))  # atomic writes leave no temporary files
    err = capsys.readouterr().err
    for name in checks.REGISTRY:  # one progress line per check
        assert name in err

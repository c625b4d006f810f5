"""Regenerate dustrt's validation report from scratch.

    python validation/run.py [--output-dir validation] [--bench] [--no-figures]

Runs every check of validation/checks.py (comparisons against published tables, analytic
results and textbook statistics, then the separately reported implementation checks),
draws the figures under <output-dir>/figures/, reads the latest benchmark results (<output-dir>/results/bench_*.json; with --bench the three
benchmark scripts are run first) and writes <output-dir>/REPORT.md. All outputs are written
atomically. Progress: one line per check on stderr. Exit status 1 if any check fails or
raises, 0 otherwise.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
import traceback
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import checks  # noqa: E402
from machine import atomic_write_text, machine_description, now_utc  # noqa: E402

BENCHES = ("bench_optics", "bench_columns", "bench_limb")
COLUMNS = ("quantity", "source", "reference", "dustrt", "difference", "tolerance", "tolerance basis", "result",
           "provenance")
SECTIONS = {
    checks.EXTERNAL: (
        "Comparisons with published sources, analytic results and independent codes",
        "dustrt against results it was not built from: tables computed by others, closed-form results the code "
        "does not contain, another Mie code, simulated coverage and count statistics.",
    ),
    checks.IMPLEMENTATION: (
        "Implementation checks",
        "dustrt against the published table, constant or formula it was built from (the shipped E-490 and "
        "Table 17 data, the coded Eq. 22 colour law, the coded inner-zodiacal-light and heliocentric power laws, "
        "the closed-form flat-prior Bayesian limit). These rows show that the code reproduces its inputs; they "
        "are not validation against the outside world and agreement here says nothing about whether those "
        "inputs describe nature.",
    ),
}


def _fmt(v) -> str:
    if isinstance(v, str):
        return v
    v = float(v)
    if v == 0:
        return "0"
    if 1e-3 <= abs(v) < 1e6:
        return f"{v:.10g}"
    return f"{v:.9e}"


def _cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def run_checks(names=None, progress=True):
    """Run the registry; returns a list of (check, rows, seconds, error text or None, warnings)."""
    results = []
    for name in names or checks.REGISTRY:
        c = checks.REGISTRY[name]
        t0 = time.perf_counter()
        err = None
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                rows = list(c.func())
            except Exception:  # a check that raises is reported as a failure, not hidden
                rows = []
                err = traceback.format_exc(limit=3).strip().splitlines()[-1]
        dt = time.perf_counter() - t0
        msgs = sorted({f"{w.category.__name__}: {w.message}" for w in caught})
        ok = err is None and rows and all(r.passed for r in rows)
        if progress:
            status = "ok" if ok else "FAIL"
            print(f"[{len(results) + 1:2d}/{len(names or checks.REGISTRY)}] {name:42s} {len(rows):3d} rows "
                  f"{dt:6.2f} s  {status}" + (f"  ({err})" if err else ""), file=sys.stderr, flush=True)
        results.append((c, rows, dt, err, msgs))
    return results


def draw_figures(results, figure_dir: Path, progress=True):
    """Draw each check's figure; returns {check name: path or error text}."""
    out = {}
    for c, *_ in results:
        if c.figure is None:
            continue
        t0 = time.perf_counter()
        try:
            with warnings.catch_warnings(record=True):
                warnings.simplefilter("always")
                out[c.name] = Path(c.figure(figure_dir))
            status = "ok"
        except Exception:
            out[c.name] = "error: " + traceback.format_exc(limit=3).strip().splitlines()[-1]
            status = "FAIL"
        if progress:
            print(f"[fig] {c.name:42s} {time.perf_counter() - t0:6.2f} s  {status}", file=sys.stderr, flush=True)
    return out


def run_benches(progress=True):
    """Run the three benchmark scripts (each writes results/<name>.json)."""
    for name in BENCHES:
        if progress:
            print(f"[bench] {name} ...", file=sys.stderr, flush=True)
        subprocess.run([sys.executable, str(HERE / f"{name}.py")], check=True, cwd=HERE.parent)


def read_bench_results(results_dir: Path):
    out = []
    for name in BENCHES:
        path = results_dir / f"{name}.json"
        if path.is_file():
            out.append(json.loads(path.read_text(encoding="utf-8")))
        else:
            out.append({"name": name, "missing": str(path)})
    return out


def environment() -> dict:
    import platform

    d = machine_description()
    d["implementation"] = platform.python_implementation()
    return d


def report_markdown(results, figures, benches, env, generated, command, report_dir: Path) -> str:
    n_rows = sum(len(r[1]) for r in results)
    n_fail_rows = sum(1 for r in results for row in r[1] if not row.passed)
    failed_checks = [c.name for c, rows, _dt, err, _w in results if err or not rows or not all(x.passed for x in rows)]
    total_s = sum(r[2] for r in results)
    order = {k: i for i, k in enumerate(checks.CHECK_KINDS)}
    results = sorted(results, key=lambda r: order[r[0].kind])  # stable: registry order within a kind
    n_ext_checks = sum(1 for r in results if r[0].kind == checks.EXTERNAL)
    n_impl_checks = len(results) - n_ext_checks
    n_ext_rows = sum(len(r[1]) for r in results if r[0].kind == checks.EXTERNAL)
    n_impl_rows = n_rows - n_ext_rows
    lines = [
        "# dustrt validation report",
        "",
        f"Generated by `{command}` on {generated} (UTC). Do not edit by hand: regenerate with "
        "`python validation/run.py` (see DEVELOPERS.md, \"Validation report\").",
        "",
        f"- dustrt {env['dustrt']}; Python {env['python']} ({env['implementation']}), numpy {env['numpy']}, "
        f"numba {env['numba']}",
        f"- machine: {env['cpu']}, {env['cores']} cores, {env['platform']}",
        f"- {len(results)} checks, {n_rows} comparisons, {n_fail_rows} failing; checks ran in {total_s:.1f} s "
        "(after numba compilation, which is cached)",
        "",
        "**Result: all checks pass.**" if not failed_checks else f"**Result: FAILING checks: {', '.join(failed_checks)}.**",
        "",
        "**What this report does not validate.** There is no comparison of the end-to-end limb radiance with a "
        "published lunar-limb model or measurement. The end-to-end chain is checked piecewise (Mie optics, "
        "solar spectrum, line-of-sight columns and shadow, zodiacal background, instrument counts, statistics, "
        "below) plus the analytic radiance identity radiance = F·C_sca·P/4π·N_sunlit (extinction off), tested "
        "in `tests/test_forward.py` (`test_radiance_equals_formula_without_extinction`).",
        "",
        f"- external comparisons: {n_ext_checks} checks, {n_ext_rows} comparisons; implementation checks: "
        f"{n_impl_checks} checks, {n_impl_rows} comparisons (separate section below).",
        "",
        "Difference is relative (|dustrt − ref| / |ref|, marked rel) or absolute (|dustrt − ref|, marked abs), as "
        "stated; the tolerance is of the same kind. Tolerances are set from the source, never fitted to the result: "
        "half a unit in the last printed digit of a printed reference; an analytic error bound; the accuracy the "
        "line-of-sight integrator is asked for (relative_tolerance, its documented contract); or four binomial "
        "standard errors of a fixed-seed simulation; a published uncertainty. Where none of these exists the "
        "tolerance is a rule of the trade and the *tolerance basis* column says \"common practice\".",
        "",
        "Provenance (of the reference value): *published* = read in the named source; "
        "*analytic* = closed form or exact identity evaluated here, or computed from the stated formula; "
        "*computed from the published table* = derived here from a published data table; *recalled from memory* = agreement with the "
        "printed source is recalled, not re-read; *common practice* = a rule of the trade; *independent code* = "
        "another general-purpose implementation of the same theory.",
        "",
    ]
    group = kind = None
    for i, (c, rows, dt, err, msgs) in enumerate(results):
        if c.kind != kind:
            kind = c.kind
            title, blurb = SECTIONS[kind]
            lines += [f"## {title}", "", blurb, ""]
        if c.group != group:
            group = c.group
            lines += [f"### {group}", "", "| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
        for r in rows:
            lines.append("| " + " | ".join(_cell(x) for x in (
                r.quantity, r.source, _fmt(r.reference), _fmt(r.value), f"{r.difference:.2e} ({r.difference_kind})",
                f"{r.tolerance:.1e} ({r.difference_kind})", r.tolerance_basis or "-",
                "pass" if r.passed else "**FAIL**", r.provenance)) + " |")
        if err or not rows:
            lines.append("| " + " | ".join(_cell(x) for x in (
                f"check `{c.name}`", "-", "-", "-", "-", "-", "-", f"**FAIL** ({err or 'no rows'})", "-")) + " |")
        if msgs:
            lines.append("| " + " | ".join(_cell(x) for x in (
                f"check `{c.name}` warnings", "; ".join(msgs), "-", "-", "-", "-", "-", "note", "-")) + " |")
        # close the table before a group change or at the end, with figures of this group
        nxt = i + 1
        if nxt == len(results) or results[nxt][0].group != group:
            lines.append("")
            if group in checks.GROUP_NOTES:
                lines += [f"*Note:* {checks.GROUP_NOTES[group]}", ""]
            for c2, *_ in results:
                if c2.group == group and c2.name in figures:
                    fig = figures[c2.name]
                    if isinstance(fig, Path):
                        rel = fig.resolve().relative_to(report_dir.resolve()) if fig.resolve().is_relative_to(
                            report_dir.resolve()) else fig
                        lines += [f"![{c2.name}]({rel.as_posix()})", "", f"*Figure: check `{c2.name}`.*", ""]
                    else:
                        lines += [f"Figure for `{c2.name}` could not be drawn: {fig}", ""]
    lines += [
        "## Speed",
        "",
        "Latest results of the benchmark scripts (`python validation/bench_optics.py`, `bench_columns.py`, "
        "`bench_limb.py`; `python validation/run.py --bench` reruns them first). Each compares dustrt with a "
        "straightforward reference on the same problem; speed is never asserted in tests, and timings depend on "
        "the machine they ran on.",
        "",
        "| benchmark | speed ratio | what the ratio compares | timings [s] | largest difference | machine | date (UTC) |",
        "|---|---|---|---|---|---|---|",
    ]
    for b in benches:
        if "missing" in b:
            lines.append(f"| {b['name']} | - | not run yet (`{b['missing']}` missing) | - | - | - | - |")
            continue
        m = b["machine"]
        ratio = f"{b['ratio']:.1f}x"
        if "ratio_full_pipeline" in b:
            ratio += f" (full pipeline incl. optics: {b['ratio_full_pipeline']:.0f}x)"
        timings = ", ".join(f"{k} {v:.3g}" for k, v in b["timings_s"].items())
        diffs = ", ".join(f"{k} {v:.1e}" for k, v in b["max_difference"].items())
        mach = f"{m['cpu']}, {m['cores']} cores; Python {m['python']}, numpy {m['numpy']}, numba {m['numba']}"
        lines.append("| " + " | ".join(_cell(x) for x in (
            b["name"], ratio, b["ratio_description"], timings, diffs, mach, b["date"])) + " |")
    lines.append("")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate validation/REPORT.md, figures and the speed table.")
    parser.add_argument("--output-dir", default=str(HERE), help="folder for REPORT.md and figures/ (default: validation)")
    parser.add_argument("--bench", action="store_true", help="run the three benchmark scripts first")
    parser.add_argument("--no-figures", action="store_true", help="skip the figures")
    parser.add_argument("--results-dir", default=str(HERE / "results"),
                        help="folder of the benchmark JSON results (default: validation/results)")
    args = parser.parse_args(argv)
    out = Path(args.output_dir)
    out.mkdir(parents=True, exist_ok=True)
    if args.bench:
        run_benches()
    results = run_checks()
    figures = {} if args.no_figures else draw_figures(results, out / "figures")
    benches = read_bench_results(Path(args.results_dir))
    command = "python validation/run.py" + (" " + " ".join(argv if argv is not None else sys.argv[1:])).rstrip()
    text = report_markdown(results, figures, benches, environment(), now_utc(), command.strip(), out)
    atomic_write_text(out / "REPORT.md", text)
    failed = [c.name for c, rows, _dt, err, _w in results if err or not rows or not all(r.passed for r in rows)]
    bad_fig = [k for k, v in figures.items() if not isinstance(v, Path)]
    print(f"wrote {out / 'REPORT.md'}: {len(results)} checks, {sum(len(r[1]) for r in results)} comparisons, "
          f"{len(failed)} failing checks" + (f" ({', '.join(failed)})" if failed else "")
          + (f"; figures failed: {', '.join(bad_fig)}" if bad_fig else ""), file=sys.stderr)
    return 1 if failed or bad_fig else 0


if __name__ == "__main__":
    sys.exit(main())

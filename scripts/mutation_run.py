"""Mutation-testing run over the core modules (``picker/core/*``), outside CI.

mutmut (a mutation-testing library, not a dependency of picker) makes small
deliberate bugs in each core function (a ``>=`` turned into ``>``, a constant
changed, an argument dropped) and runs the tests that reach that function; a
mutant the tests fail on is "killed", one they pass on "survived". The share
killed per module is a measure of how well the tests bite.

mutmut lives in its own virtual environment, never in picker's::

    python -m venv /tmp/venv-mut && /tmp/venv-mut/bin/pip install mutmut
    /tmp/venv-mut/bin/python scripts/mutation_run.py \\
        --site /tmp/venv-X/lib/python3.11/site-packages --budget 3000

``--site`` names the site-packages of an environment where picker's own
dependencies are installed (numpy, scipy, pydantic, typer, rich, hypothesis, ...);
it is added to the mutation environment's path with a ``.pth`` file so nothing
is installed twice. The run works on a copy of the checkout (``--workdir``),
mutates only ``--modules`` and runs only ``--tests`` (the test files that reach
the core), one process at a time, and stops after ``--budget`` seconds; the
mutants it did not reach are reported as "not checked". The report (Markdown)
goes to ``--report``.

All modules are mutated in one copy, so mutmut's coverage run ("stats", every
selected test once under tracing, minutes on a loaded machine) is paid once;
then each module gets its own ``mutmut run 'picker.core.<module>.*'`` with a fair
share of the time left, which reruns only the tests that reach that module.
(An earlier version copied and traced once per module: on a loaded machine the
eight coverage runs took the whole 40-minute budget.)
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

#: Test files that exercise picker/core (the run is slow: only these are run).
DEFAULT_TESTS = (
    "tests/test_search.py",
    "tests/test_search_edges.py",
    "tests/test_montecarlo.py",
    "tests/test_yield_interval.py",
    "tests/test_sampling.py",
    "tests/test_conditional.py",
    "tests/test_topup.py",
)

#: Slow command-level tests left out of the mutation run (each takes 40-130 s and
#: would be re-run for every mutant of every core function it reaches); the
#: faster tests in the same files check the same edges and formulas directly.
DEFAULT_DESELECT = (
    "loaded_search_asks_exactly_the_start_up_margin_given",
    "solve_reports_passed_over_samples_and_the_spec_confidence",
)

#: mutmut's exit-code meanings (mutmut.stats.status_by_exit_code, version 3).
_STATUS = {
    1: "killed",
    3: "killed",
    37: "killed",  # caught by the type checker
    0: "survived",
    5: "no tests",
    33: "no tests",
    34: "skipped",
    35: "suspicious",
    36: "timeout",
    24: "timeout",
    -24: "timeout",
    152: "timeout",
    255: "timeout",
    -11: "segfault",
    -9: "segfault",
    None: "not checked",
}


def _prepare(
    workdir: Path, modules: list[str], tests: list[str], site: str | None, deselect: list[str]
) -> None:
    """Copy the checkout to ``workdir`` and write mutmut's settings there."""
    if workdir.exists():
        shutil.rmtree(workdir)  # only ever the run's own folder under --workdir
    workdir.mkdir(parents=True)
    for name in ("picker", "tests", "series_data", "demo_specs"):
        shutil.copytree(ROOT / name, workdir / name, ignore=shutil.ignore_patterns("__pycache__"))
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, workdir / name)
    tests = [t for t in tests if (workdir / t).exists()]
    settings = {
        "source_paths": ["picker/"],
        "only_mutate": modules,
        "also_copy": ["series_data/", "demo_specs/", "README.md"],
        "pytest_add_cli_args_test_selection": tests,
        "pytest_add_cli_args": ["-p", "no:cacheprovider", "-q"]
        + (["-k", " and ".join(f"not {name}" for name in deselect)] if deselect else []),
        "use_git_change_detection": False,
    }
    lines = ["", "[tool.mutmut]"] + [f"{k} = {json.dumps(v)}" for k, v in settings.items()]
    with open(workdir / "pyproject.toml", "a", encoding="utf-8") as fh:
        fh.write("\n".join(lines) + "\n")
    if site:  # picker's dependencies, seen by the mutation environment
        import sysconfig

        pth = Path(sysconfig.get_paths()["purelib"]) / "picker_mutation_deps.pth"
        pth.write_text(site + "\n", encoding="utf-8")


def _results(workdir: Path) -> dict[str, Counter[str]]:
    """Per module, how many mutants ended in each status (from mutmut's .meta files)."""
    out: dict[str, Counter[str]] = {}
    for meta in sorted(workdir.glob("mutants/**/*.py.meta")):
        data = json.loads(meta.read_text(encoding="utf-8"))
        codes = data.get("exit_code_by_key", {})
        if not codes:
            continue
        module = str(meta.relative_to(workdir / "mutants"))[: -len(".meta")]
        out[module] = Counter(_STATUS.get(c, f"exit {c}") for c in codes.values())
    return out


def _report(
    results: dict[str, Counter[str]], seconds: float, tests: list[str], deselect: list[str]
) -> str:
    """The Markdown report: one row per module, share killed of the mutants checked."""
    rows = [
        "# Mutation run over picker/core",
        "",
        f"mutmut {_mutmut_version()}, {seconds / 60:.0f} min, one process; tests run: "
        + ", ".join(tests)
        + (" (tests left out: " + ", ".join(deselect) + ")" if deselect else "")
        + ".",
        "",
        "Share killed = killed / (killed + survived + timeout); mutants the time budget "
        "did not reach are 'not checked' and left out of the share. Killed of all = killed / every mutant of the module, counting 'no tests' (functions the "
        "selected tests never call) and 'not checked' as not killed.",
        "",
        "| module | mutants | checked | killed | survived | timeout | no tests | "
        "not checked | share killed | killed of all |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    total: Counter[str] = Counter()
    for module, c in results.items():
        total.update(c)
        rows.append(_row(module, c))
    rows.append(_row("**all**", total))
    return "\n".join(rows) + "\n"


def _row(module: str, c: Counter[str]) -> str:
    n = sum(c.values())
    judged = c["killed"] + c["survived"] + c["timeout"]
    share = f"{c['killed'] / judged:.0%}" if judged else "-"
    of_all = f"{c['killed'] / n:.0%}" if n else "-"
    return (
        f"| {module} | {n} | {n - c['not checked']} | {c['killed']} | {c['survived']} | "
        f"{c['timeout']} | {c['no tests']} | {c['not checked']} | {share} | {of_all} |"
    )


def _mutmut_version() -> str:
    try:
        from importlib.metadata import version

        return version("mutmut")
    except Exception:  # noqa: BLE001 - only a label in the report
        return "(version unknown)"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--modules", nargs="+", default=["picker/core/*"])
    ap.add_argument("--tests", nargs="+", default=list(DEFAULT_TESTS))
    ap.add_argument(
        "--deselect",
        nargs="*",
        default=list(DEFAULT_DESELECT),
        help="test names (substrings) left out of the run",
    )
    ap.add_argument("--budget", type=float, default=3600.0, help="seconds before stopping")
    ap.add_argument("--workdir", type=Path, default=Path("/tmp/picker-mutation"))
    ap.add_argument("--report", type=Path, default=Path("mutation_report.md"))
    ap.add_argument("--site", help="site-packages holding picker's dependencies")
    ap.add_argument("--report-only", action="store_true", help="only re-read a finished run")
    args = ap.parse_args(argv)

    start = time.monotonic()
    modules = [str(m) for pat in args.modules for m in sorted(ROOT.glob(pat))]
    modules = [m[len(str(ROOT)) + 1 :] for m in modules if not m.endswith("__init__.py")]
    if not args.report_only:
        _prepare(args.workdir, modules, args.tests, args.site, args.deselect)
    for k, module in enumerate(modules):
        if args.report_only:
            break
        # each module a fair share of the time left (unused time carries on)
        budget = (args.budget - (time.monotonic() - start)) / (len(modules) - k)
        pattern = module[: -len(".py")].replace("/", ".") + ".*"
        env = dict(os.environ, PYTHONDONTWRITEBYTECODE="1")
        cmd = [sys.executable, "-m", "mutmut", "run", "--max-children", "1", pattern]
        with open(args.workdir / f"mutmut-{Path(module).stem}.log", "w", encoding="utf-8") as log:
            proc = subprocess.Popen(
                cmd, cwd=args.workdir, env=env, stdout=log, stderr=log, start_new_session=True
            )
            try:
                proc.wait(timeout=budget)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGTERM)  # mutmut and the test run it forked
                proc.wait()
                log.write(f"\nstopped after its {budget:.0f} s share of the budget\n")
    results = _results(args.workdir)
    text = _report(results, time.monotonic() - start, args.tests, args.deselect)
    args.report.write_text(text, encoding="utf-8")
    sys.stdout.write(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

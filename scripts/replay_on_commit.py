"""Run issue 13's tests on the code before the issue's work, and on today's code.

The issue is done when "each failure above has a test that fails on today's
code and passes". This script shows it: it checks the commit before the issue's
first change out into a temporary git worktree (``git worktree add --detach``,
removed afterwards), copies today's test files over that tree's, runs the
selected tests there with ``PYTHONPATH`` on the old tree, runs them again on
this checkout, and writes a Markdown report: one row per test (old, new), then
one row per failure kind of the issue's "Why" list with the tests that show it.

A test that fails on the old code only because it names a helper that did not
exist then (ImportError, AttributeError on a ``picker`` module) is reported as
"error (API missing)", never as a failure. Each test runs under a time limit
(``--timeout``) so a hang on the old code is reported as a failure, not a hung
run; on the old tree a SIGTERM/SIGHUP sent by a test to the test process raises
an exception instead of killing pytest (the old code installs no handler).

Second part, ``--mutations``: the six deliberate bugs the issue names are put
into a worktree of HEAD one at a time and the tests meant to catch each are run;
"caught" means at least one of them fails.

    python scripts/replay_on_commit.py --report docs/issue13_replay.md [--mutations]
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

#: The first commit of issue 13's work; the replay runs on its parent.
FIRST_ISSUE_COMMIT_SUBJECT = "files: one bounded reader"

#: Today's test files copied over the old tree (the helpers they import too).
COPY = (
    "tests/conftest.py",
    "tests/test_fuzz_harness.py",
    "tests/test_hardening_inputs.py",
    "tests/test_hardening_replay.py",
    "tests/test_fuzz_odd_files.py",
    "tests/test_cli.py",
    "tests/test_cli_calibrate.py",
)

#: The tests run on both sides (pytest node ids or files).
SELECT = (
    "tests/test_hardening_inputs.py",
    "tests/test_hardening_replay.py",
    "tests/test_fuzz_odd_files.py",
    "tests/test_cli.py::test_csv_and_table_formats",
    "tests/test_cli_calibrate.py::test_values_beyond_physical_ranges_are_one_line_errors",
    "tests/test_cli_calibrate.py::test_unit_ids_are_never_read_as_markup",
    "tests/test_cli_calibrate.py::test_a_large_batch_is_summarised_in_a_bounded_table",
)

HI = "test_hardening_inputs.py::"
HR = "test_hardening_replay.py::"
FO = "test_fuzz_odd_files.py::"
CC = "test_cli_calibrate.py::"

#: The failure kinds of the issue's "Why" list -> test name prefixes that show them.
KINDS: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    (
        "data loss",
        "solve --format csv -o <stock list> --force replaces the stock list",
        (HI + "test_solve_never_writes_over_a_stock_list", FO + "test_an_output_never_replaces"),
    ),
    (
        "data loss",
        "evaluate -o <a file the spec names> --force replaces it",
        (HI + "test_evaluate_never_writes_over_its_lot_file", FO + "test_an_output_never_replaces"),
    ),
    (
        "data loss",
        "a spec's lot file replaced by the results",
        (HI + "test_evaluate_never_writes_over_its_lot_file",),
    ),
    (
        "data loss",
        "-o <character device> --force replaces the device with a file",
        (HI + "test_an_output_must_be_a_regular_file_even_with_force",),
    ),
    ("traceback", "rich markup in the title", (HR + "test_markup_in_a_title", FO + "test_markup")),
    (
        "traceback",
        "rich markup in a measurement unit id",
        (HR + "test_markup_in_a_measurement_unit_id", CC + "test_unit_ids_are_never_read"),
    ),
    ("traceback", "rich markup in a plan channel name", (HR + "test_markup_in_a_plan_channel",)),
    (
        "traceback",
        "arrays nested 900 deep (RecursionError)",
        (HI + "test_deep_nesting_is_one_line",),
    ),
    (
        "traceback",
        "inline tables 2,000 deep (RecursionError)",
        (HI + "test_deep_nesting_is_one_line",),
    ),
    (
        "traceback",
        "a 401-digit integer (OverflowError in the quantity parser)",
        (HI + "test_a_huge_integer_is_one_line", HI + "test_a_401_digit_integer"),
    ),
    ("traceback", "a symlink loop as input", (HI + "test_a_symlink_loop_as_input",)),
    ("traceback", "a symlink loop as output", (HI + "test_an_output_that_is_a_symlink_loop",)),
    (
        "traceback",
        "an unreadable stock list (PermissionError)",
        (HI + "test_an_unreadable_stock_list",),
    ),
    (
        "traceback",
        "a CSV cell over 131,072 characters (_csv.Error)",
        (HI + "test_a_csv_cell_over_the_limit", HR + "test_a_csv_cell_over_the_limit_in_a_meas"),
    ),
    (
        "hang",
        "a FIFO with no writer blocks every command",
        (
            HI + "test_a_fifo_with_no_writer",
            HI + "test_a_fifo_stock_list",
            HI + "test_a_fifo_lot",
            HR + "test_a_fifo_a_plan_names",
            FO + "test_any_input_replaced_by_an_odd_file",
        ),
    ),
    ("hang", "solve /dev/zero reads until memory runs out", (HI + "test_a_device_is_refused",)),
    (
        "memory",
        "pairs of 500-2,000 stock capacitors built before the limits (GBs, MemoryError)",
        (HI + "test_two_thousand_stock_capacitors",),
    ),
    (
        "memory",
        "calibrating a huge batch prints one row per unit (GBs, minutes)",
        (HR + "test_a_large_calibration_batch", CC + "test_a_large_batch_is_summarised"),
    ),
    (
        "outputs",
        "every file written 0600 whatever the umask",
        (HI + "test_new_files_take_the_umask", HR + "test_solve_output_takes_the_umask"),
    ),
    (
        "outputs",
        "--force turns a 0664 file into 0600",
        (HI + "test_new_files_take_the_umask", HR + "test_solve_output_takes_the_umask"),
    ),
    (
        "outputs",
        "two writers without --force both exit 0 (check, then rename)",
        (HI + "test_no_overwrite_without_force_is_atomic",),
    ),
    (
        "outputs",
        "solve -o readonly/o.json runs the whole job before refusing",
        (HI + "test_outputs_are_checked_before_the_run",),
    ),
    (
        "outputs",
        "consolidate --bom missing/b.csv runs the whole job before refusing",
        (HI + "test_outputs_are_checked_before_the_run",),
    ),
    (
        "outputs",
        "SIGTERM during --plot leaves the temporary PNG",
        (HI + "test_sigterm_while_a_plot",),
    ),
    (
        "outputs",
        "SIGHUP during --plot leaves the temporary PNG",
        (HR + "test_sighup_while_a_plot",),
    ),
    (
        "outputs",
        "Ctrl-C exits 130 silently (SIGTERM/SIGHUP mid-run too)",
        (HI + "test_a_signal_mid_run",),
    ),
    (
        "text",
        "table time grows with the square of the title's length",
        (HR + "test_a_100k_character_title",),
    ),
    (
        "text",
        "terminal escape sequences in a title reach the terminal raw",
        (HR + "test_terminal_escapes_in_a_title", FO + "test_markup"),
    ),
    (
        "text",
        "stock = '../../etc/shadow' echoes that file's first line",
        (HI + "test_a_named_file_that_is_not_the_kind_is_not_echoed",),
    ),
    (
        "numbers",
        "a measured frequency of 1e308 Hz accepted (+inf ppm)",
        (CC + "test_values_beyond_physical_ranges",),
    ),
    (
        "numbers",
        "tolerance 99 % with the normal distribution draws negative values",
        (
            HI + "test_a_normal_distribution_that_would_draw",
            HI + "test_evaluate_tol_with_the_normal",
        ),
    ),
    (
        "numbers",
        "a UTF-8 byte-order mark makes a spec not valid TOML",
        (HI + "test_a_spec_with_a_byte_order_mark",),
    ),
    ("numbers", "'1 aF' refused", (HI + "test_one_attofarad", HR + "test_one_attofarad")),
    (
        "weak tests",
        "tests/test_cli.py passes whenever 'mH' appears, whatever the exit code",
        ("test_cli.py::test_csv_and_table_formats",),
    ),
    (
        "weak tests",
        "output-safety tests list only the spec as an input",
        (
            HI + "test_solve_never_writes_over_a_stock_list",
            HI + "test_plan_inputs_include",
            FO + "test_an_output_never_replaces",
        ),
    ),
)


@dataclass(frozen=True)
class Mutation:
    """One deliberate bug: replace ``old`` by ``new`` in ``path``; ``tests`` should fail."""

    name: str
    path: str
    old: str
    new: str
    tests: tuple[str, ...]


EDGE_TESTS = ("tests/test_search_edges.py", "-k", "not loaded_search", "tests/test_montecarlo.py")
MUTATIONS = (
    Mutation(
        "window edge compared with > instead of >=",
        "picker/core/montecarlo.py",
        "return (lc >= lc_lo) & (lc <= lc_hi)",
        "return (lc > lc_lo) & (lc <= lc_hi)",
        EDGE_TESTS,
    ),
    Mutation(
        "lower window edge moved by 1 ppm",
        "picker/core/montecarlo.py",
        "lc_hi = 1.0 / (TWO_PI * problem.f_min) ** 2",
        "lc_hi = 1.0 / (TWO_PI * problem.f_min * (1 + 1e-6)) ** 2",
        EDGE_TESTS,
    ),
    Mutation(
        "reported interval ignores [yield] confidence",
        "picker/core/montecarlo.py",
        "lo, hi = binomial_interval(k, n, confidence, method)",
        "lo, hi = binomial_interval(k, n, 0.95, method)",
        ("tests/test_yield_interval.py",),
    ),
    Mutation(
        "yield reported as (k+1)/(n+2)",
        "picker/core/montecarlo.py",
        "return YieldEstimate(k / n, lo, hi,",
        "return YieldEstimate((k + 1) / (n + 2), lo, hi,",
        ("tests/test_yield_interval.py",),
    ),
    Mutation(
        "screen drops its second-order bias term",
        "picker/core/screen.py",
        "out = out - s * sigs[p] ** 2 / 2",
        "out = out - 0.0 * s * sigs[p] ** 2 / 2",
        ("tests/test_yield_interval.py", "-k", "second_order"),
    ),
    Mutation(
        "loaded search demands 5 % more start-up margin than asked",
        "picker/circuit/loaded_search.py",
        "ok = fb & runs & in_steady & (m_s >= m_lo) & ~(m_s > m_hi)",
        "ok = fb & runs & in_steady & (m_s >= 1.05 * m_lo) & ~(m_s > m_hi)",
        ("tests/test_search_edges.py", "-k", "loaded_search"),
    ),
)

#: A pytest plugin (written to the temporary folder): a time limit per test, and on the
#: old tree SIGTERM/SIGHUP sent to the test process turned into an exception.
PLUGIN = """
import os, signal
import pytest

LIMIT = int(os.environ.get("REPLAY_TIMEOUT", "1800"))
GUARD = os.environ.get("REPLAY_GUARD_SIGNALS") == "1"


# BaseException, so hypothesis does not catch it and shrink (and hang again)
class ReplayTimeout(BaseException):
    pass


class SignalReachedTheTest(BaseException):
    pass


def _alarm(signum, frame):
    raise ReplayTimeout(f"over the replay's time limit of {LIMIT} s (a hang)")


def _guard(signum, frame):
    raise SignalReachedTheTest(f"signal {signum} reached the test process unhandled")


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_call(item):
    old = signal.signal(signal.SIGALRM, _alarm)
    saved = {}
    if GUARD:
        for s in (signal.SIGTERM, signal.SIGHUP):
            saved[s] = signal.signal(s, _guard)
    signal.alarm(LIMIT)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
        for s, h in saved.items():
            signal.signal(s, h)
"""

_MISSING_API = ("ImportError", "ModuleNotFoundError", "cannot import name", "has no attribute")


def _git(*args: str, cwd: Path = ROOT) -> str:
    return subprocess.run(
        ["git", *args], cwd=cwd, check=True, capture_output=True, text=True
    ).stdout.strip()


def pre_issue_commit() -> str:
    """The parent of the first commit of issue 13's work (found by its subject)."""
    first = _git("log", "--format=%H", f"--grep=^{FIRST_ISSUE_COMMIT_SUBJECT}", "HEAD")
    if not first:
        raise SystemExit(f"no commit whose subject starts {FIRST_ISSUE_COMMIT_SUBJECT!r}")
    return _git("rev-parse", first.splitlines()[-1] + "^")


def _limit_memory() -> None:
    """4 GiB of address space for the old code's run (it read /dev/zero until 2.5 GB)."""
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    resource.setrlimit(resource.RLIMIT_AS, (4 << 30, hard))


def run_tests(
    tree: Path, select: list[str], tmp: Path, label: str, timeout: int, guard: bool
) -> dict[str, tuple[str, str]]:
    """Run ``select`` in ``tree`` with that tree's picker first on the path.

    Returns node id (from tests/) -> (outcome, first line of the reason)."""
    xml = tmp / f"{label}.xml"
    env = dict(
        os.environ,
        PYTHONPATH=os.pathsep.join([str(tree), str(tmp)]),
        REPLAY_TIMEOUT=str(timeout),
        REPLAY_GUARD_SIGNALS="1" if guard else "0",
        PYTHONDONTWRITEBYTECODE="1",
    )
    where = subprocess.run(
        [sys.executable, "-c", "import picker; print(picker.__file__)"],
        env=env,
        cwd=tmp,
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    if not where.startswith(str(tree)):
        raise SystemExit(f"{label}: picker imported from {where}, not from {tree}")
    cmd = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-p", "replay_plugin"]
    cmd += ["--junitxml", str(xml), "-o", "junit_family=xunit1", *select]
    with open(tmp / f"{label}.log", "w", encoding="utf-8") as log:
        subprocess.run(
            cmd,
            cwd=tree,
            env=env,
            stdout=log,
            stderr=log,
            preexec_fn=_limit_memory if guard else None,
            check=False,
        )
    return _parse(xml)


def _parse(xml: Path) -> dict[str, tuple[str, str]]:
    out: dict[str, tuple[str, str]] = {}
    if not xml.exists():
        return out
    for case in ET.parse(xml).getroot().iter("testcase"):
        file = case.get("file") or case.get("classname", "").replace(".", "/") + ".py"
        node = f"{Path(file).name}::{case.get('name')}"
        outcome, why = "passed", ""
        for child in case:
            if child.tag in ("failure", "error"):
                first = (child.get("message") or child.text or "").strip().splitlines()
                why_line = first[0] if first else ""
                text = (child.get("message") or "") + (child.text or "")
                if any(m in text for m in _MISSING_API) and "picker" in text:
                    outcome = "error (API missing)"
                elif child.tag == "error":
                    outcome = "error"
                else:
                    outcome = "failed"
                why = why_line[:110].replace("|", "/")
                break
            if child.tag == "skipped":
                outcome = "xfail" if child.get("type") == "pytest.xfail" else "skipped"
        out[node] = (outcome, why)
    return out


def _worktree(commit: str, parent: Path, name: str) -> Path:
    tree = parent / name
    _git("worktree", "add", "--detach", str(tree), commit)
    return tree


def _remove_worktree(tree: Path) -> None:
    subprocess.run(["git", "worktree", "remove", "--force", str(tree)], cwd=ROOT, check=False)
    shutil.rmtree(tree, ignore_errors=True)
    subprocess.run(["git", "worktree", "prune"], cwd=ROOT, check=False)


def replay(commit: str, tmp: Path, timeout: int) -> tuple[dict, dict]:
    old = _worktree(commit, tmp, "old")
    try:
        for name in COPY:
            shutil.copy2(ROOT / name, old / name)
        before = run_tests(old, list(SELECT), tmp, "old", timeout, guard=True)
    finally:
        _remove_worktree(old)
    after = run_tests(ROOT, list(SELECT), tmp, "new", timeout, guard=False)
    return before, after


def mutations(tmp: Path, timeout: int) -> list[tuple[Mutation, str, str]]:
    """Each mutation put into a worktree of HEAD; 'caught' when a selected test fails."""
    tree = _worktree("HEAD", tmp, "mutant")
    rows = []
    try:
        for m in MUTATIONS:
            path = tree / m.path
            text = path.read_text(encoding="utf-8")
            if text.count(m.old) != 1:
                rows.append((m, "not applied", "the code to mutate was not found once"))
                continue
            path.write_text(text.replace(m.old, m.new), encoding="utf-8")
            try:
                res = run_tests(tree, list(m.tests), tmp, "mutant", timeout, guard=False)
            finally:
                path.write_text(text, encoding="utf-8")
            failed = [n for n, (o, _) in res.items() if o in ("failed", "error")]
            verdict = "caught" if failed else "missed"
            rows.append((m, verdict, ", ".join(failed[:3]) + (" ..." if len(failed) > 3 else "")))
    finally:
        _remove_worktree(tree)
    return rows


def _matches(node: str, prefix: str) -> bool:
    return node == prefix or node.startswith(prefix)


def report(commit: str, before: dict, after: dict, muts: list, seconds: float) -> str:
    nodes = sorted(set(before) | set(after))
    count = {k: 0 for k in ("failed", "error", "error (API missing)", "passed", "other")}
    new_pass = 0
    lines = [
        "# Issue 13: its tests on the code before the issue, and now",
        "",
        f"Old code: commit {commit[:7]} (`{_git('log', '-1', '--format=%s', commit)[:90]}`), "
        f"the parent of the first commit of the issue's work. New code: "
        f"{_git('rev-parse', '--short', 'HEAD')} and the working tree. Today's test files "
        f"run on both. Made by `python scripts/replay_on_commit.py` in {seconds / 60:.0f} min.",
        "",
        "## Per test",
        "",
        "| test | on old code | reason on old code | on new code |",
        "|---|---|---|---|",
    ]
    for n in nodes:
        o, why = before.get(n, ("not run", ""))
        a = after.get(n, ("not run", ""))[0]
        count[o if o in count else "other"] += 1
        new_pass += a == "passed"
        lines.append(f"| `{n}` | {o} | {why} | {a} |")
    lines += [
        "",
        f"Totals: {len(nodes)} tests; on old code {count['failed']} failed, {count['error']} "
        f"error, {count['error (API missing)']} error (API missing), {count['passed']} passed, "
        f"{count['other']} other; on new code {new_pass} passed.",
        "",
        "## Per failure kind of the issue's Why list",
        "",
        "Shown = at least one of its tests fails (not by a missing name) on the old code "
        "and every one of them passes on the new code.",
        "",
        "| group | failure | tests failing on old | all pass on new | shown |",
        "|---|---|---:|---|---|",
    ]
    shown = 0
    for group, what, prefixes in KINDS:
        mine = [n for n in nodes if any(_matches(n, p) for p in prefixes)]
        fail_old = [n for n in mine if before.get(n, ("",))[0] == "failed"]
        ok_new = bool(mine) and all(after.get(n, ("",))[0] == "passed" for n in mine)
        yes = bool(fail_old) and ok_new
        shown += yes
        lines.append(
            f"| {group} | {what} | {len(fail_old)} of {len(mine)} | "
            f"{'yes' if ok_new else 'NO'} | {'yes' if yes else 'NO'} |"
        )
    lines += ["", f"Failure kinds shown: {shown} of {len(KINDS)}.", ""]
    if muts:
        lines += [
            "## The six missed mutations, put into today's code",
            "",
            "| mutation | file | tests run | result | failing tests |",
            "|---|---|---|---|---|",
        ]
        for m, verdict, failed in muts:
            lines.append(f"| {m.name} | {m.path} | `{' '.join(m.tests)}` | {verdict} | {failed} |")
        lines.append("")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--commit", help="the old code (default: before issue 13's first commit)")
    ap.add_argument("--report", type=Path, default=ROOT / "docs" / "issue13_replay.md")
    ap.add_argument(
        "--timeout",
        type=int,
        default=1800,
        help="seconds per test (the fuzz tests take minutes on a loaded machine)",
    )
    ap.add_argument("--mutations", action="store_true", help="also the six mutations")
    args = ap.parse_args(argv)
    start = time.monotonic()
    commit = _git("rev-parse", args.commit) if args.commit else pre_issue_commit()
    with tempfile.TemporaryDirectory(prefix="picker-replay-") as name:
        tmp = Path(name)
        (tmp / "replay_plugin.py").write_text(PLUGIN, encoding="utf-8")
        before, after = replay(commit, tmp, args.timeout)
        muts = mutations(tmp, args.timeout) if args.mutations else []
        text = report(commit, before, after, muts, time.monotonic() - start)
    args.report.parent.mkdir(parents=True, exist_ok=True)
    args.report.write_text(text, encoding="utf-8")
    sys.stdout.write(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Regression cases the fuzz suite found, kept as files (tests/fuzz_corpus/).

Every case in ``tests/fuzz_corpus/index.toml`` is run through ``picker`` in
process; it must end with the expected exit status and, on status 2, with one
line naming the case file (or the option) and containing the listed texts.
How the cases were found is in ``tests/fuzz_corpus/README.md``.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest
from conftest import DEMO
from test_fuzz_harness import assert_clean_exit, run_cli

CORPUS = Path(__file__).resolve().parent / "fuzz_corpus"
CASES = tomllib.loads((CORPUS / "index.toml").read_text(encoding="utf-8"))["case"]


def test_every_corpus_file_is_listed_once():
    listed = [c["file"] for c in CASES if "file" in c]
    assert len(listed) == len(set(listed))
    on_disk = {p.name for p in CORPUS.iterdir() if p.name not in ("index.toml", "README.md")} - {
        c for case in CASES for c in case.get("extra_files", [])
    }
    assert on_disk == set(listed)


@pytest.mark.parametrize("case", CASES, ids=[c.get("file") or c["id"] for c in CASES])
def test_corpus_case(case, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # outputs written by a case land here
    file = str(CORPUS / case["file"]) if "file" in case else ""
    args = [a.format(file=file, demo=DEMO, tmp=tmp_path) for a in case["args"]]
    code, out, err = run_cli(args)
    names = (file,) if file and case.get("names_file", True) else ()
    if "names" in case:  # the fault is in another file the case reads
        names = (str(CORPUS / case["names"]),)
    text = assert_clean_exit(
        code, out, err, files=names, allowed=(case["exit"],), location=case.get("location", True)
    )
    for want in case.get("stderr", []):
        assert text is not None and want in text, (want, text)

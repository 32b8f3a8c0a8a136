"""docs/validation.md is current, and the reference-case registry is consistent with the tests.

The table is regenerated in memory from ``tests/reference_cases.py`` (the same functions the
tests assert on, cached, so the cost here is the cases no other test has run yet) and must
equal the committed file. ``scripts/make_validation.py --check`` does the same from the
command line; both are exercised on a fresh and on a tampered copy.
"""

from __future__ import annotations

import ast
import importlib.util
import re
from pathlib import Path

import pytest

from tests.reference_cases import CASES, TOPICS, VALIDATION_DOC, render_markdown

ROOT = Path(__file__).resolve().parents[1]
TESTS = ROOT / "tests"


def _script():
    spec = importlib.util.spec_from_file_location("make_validation",
                                                  ROOT / "scripts" / "make_validation.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="module")
def fresh_text() -> str:
    return render_markdown()


def test_validation_doc_is_current(fresh_text):
    committed = (ROOT / VALIDATION_DOC).read_text(encoding="utf-8")
    assert committed == fresh_text, (
        f"{VALIDATION_DOC} is out of date: run python scripts/make_validation.py")


def test_check_passes_on_a_fresh_copy_and_fails_on_a_tampered_one(tmp_path, fresh_text,
                                                                  capsys):
    script = _script()
    fresh = tmp_path / "fresh.md"
    fresh.write_text(fresh_text, encoding="utf-8")
    assert script.main(["--check", "--out", str(fresh)]) == 0
    # tamper: change one tool value (the table's 4th column) of the first data row
    lines = fresh_text.splitlines(keepends=True)
    i = next(k for k, s in enumerate(lines) if s.startswith("| ") and "`test_" in s)
    cells = lines[i].split(" | ")
    cells[3] = cells[3] + "1"
    stale = tmp_path / "stale.md"
    stale.write_text("".join(lines[:i] + [" | ".join(cells)] + lines[i + 1:]),
                     encoding="utf-8")
    assert script.main(["--check", "--out", str(stale)]) == 1
    assert "out of date" in capsys.readouterr().out
    # a missing file is stale too; writing it makes it fresh
    missing = tmp_path / "missing.md"
    assert script.main(["--check", "--out", str(missing)]) == 1
    assert script.main(["--out", str(missing)]) == 0
    assert missing.read_text(encoding="utf-8") == fresh_text


def test_table_has_a_row_for_every_case_and_all_pass(fresh_text):
    rows = [s for s in fresh_text.splitlines() if s.startswith("| ") and "`test_" in s]
    assert len(rows) == len(CASES)
    assert f"{len(CASES)} of {len(CASES)} checks pass." in fresh_text
    assert "**FAIL**" not in fresh_text
    assert all(c.topic in TOPICS for c in CASES.values())


def _test_functions(path: Path) -> dict[str, str]:
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines()
    out = {}
    for n in ast.parse(text).body:
        if isinstance(n, ast.FunctionDef) and n.name.startswith("test_"):
            first = min([n.lineno] + [d.lineno for d in n.decorator_list])
            out[n.name] = "\n".join(lines[first - 1:n.end_lineno])  # with its decorators
    return out


def test_every_case_is_asserted_by_the_test_it_names():
    # The test a row names must exist and must refer to the case: by its full id, or by a
    # prefix ending at a dot (ids("prefix") / an f-string over the case's parameters).
    cache: dict[str, dict[str, str]] = {}
    for c in CASES.values():
        fname, func = c.test.split("::")
        funcs = cache.setdefault(fname, _test_functions(TESTS / fname))
        assert func in funcs, f"{c.id}: {c.test} does not exist"
        src = funcs[func]
        parts = c.id.split(".")
        prefixes = {".".join(parts[:k]) for k in range(2, len(parts) + 1)}
        assert any(f'"{p}' in src or f"'{p}" in src for p in prefixes), (
            f"{c.id}: {c.test} does not refer to it")


def test_every_case_names_its_source_and_unit():
    for c in CASES.values():
        assert len(c.source) > 10 and c.unit and c.quantity, c.id
        assert "§" not in c.source, c.id  # a published source, not a section pointer


def _anchor(heading: str) -> str:
    """GitHub-style anchor of a Markdown heading."""
    keep = "".join(ch for ch in heading.strip().lower() if ch.isalnum() or ch in " -_")
    return keep.replace(" ", "-")


def test_method_doc_contents_links_resolve():
    # Every in-page link of docs/method.md's contents points at one of its headings.
    text = (ROOT / "docs" / "method.md").read_text(encoding="utf-8")
    anchors = {_anchor(h) for h in re.findall(r"^#+ (.+)$", text, flags=re.M)}
    links = re.findall(r"\]\(#([^)]+)\)", text)
    assert len(links) >= 20
    missing = [a for a in links if a not in anchors]
    assert not missing, f"docs/method.md links to missing sections: {missing}"

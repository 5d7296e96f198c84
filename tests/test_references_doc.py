"""docs/references.md, the project's list of check values and their sources.

Every ``docs/references.md#section`` cited in tests/ or teffmc/ must name a heading of that
file; nothing may cite the old, unshipped ``REFERENCES.md``; every table row must name a
source; the files a row says it is used in must exist.
"""

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOC = ROOT / "docs" / "references.md"
CITE = re.compile(r"docs/references\.md#([A-Za-z0-9_-]+)")
# The old citation: a REFERENCES.md that is not this file (any case other than ours, any
# folder); the lower-case docs/references.md is not matched.
OLD = re.compile(r"REFERENCES\.md")


def _sources():
    files = sorted((ROOT / "tests").rglob("*.py")) + sorted((ROOT / "teffmc").rglob("*.py"))
    return [f for f in files if f.resolve() != Path(__file__).resolve()]


def slug(heading):
    """GitHub's anchor for a heading: lower case, punctuation dropped, spaces to hyphens."""
    text = re.sub(r"[^\w\- ]", "", heading.strip().lower())
    return text.replace(" ", "-")


def anchors(text):
    return {slug(m.group(2)) for m in re.finditer(r"^(#{1,6})\s+(.+?)\s*$", text, re.M)}


def tables(text):
    """Each markdown table as (header cells, [(line number, cells), ...])."""
    out, header, rows = [], None, []
    for no, line in enumerate(text.splitlines(), 1):
        if line.startswith("|"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            if header is None:
                header = cells
            elif not all(re.fullmatch(r":?-+:?", c) for c in cells):
                rows.append((no, cells))
        elif header is not None:
            out.append((header, rows))
            header, rows = None, []
    if header is not None:
        out.append((header, rows))
    return out


def test_slug_follows_the_github_rule():
    assert slug("R-hat, ESS and the stop rule") == "r-hat-ess-and-the-stop-rule"
    assert slug("Mie theory and optical constants") == "mie-theory-and-optical-constants"
    assert anchors("# A\n\n## Extinction laws\ntext # not a heading\n") == {"a", "extinction-laws"}


def test_every_cited_section_exists():
    known = anchors(DOC.read_text(encoding="utf-8"))
    cited = 0
    missing = []
    for f in _sources():
        for no, line in enumerate(f.read_text(encoding="utf-8").splitlines(), 1):
            for anchor in CITE.findall(line):
                cited += 1
                if anchor not in known:
                    missing.append(f"{f.relative_to(ROOT)}:{no}: #{anchor}")
    assert cited > 20, "the citations were expected in tests and code"
    assert not missing, "sections not in docs/references.md:\n" + "\n".join(missing)


def test_links_inside_the_document_resolve():
    text = DOC.read_text(encoding="utf-8")
    known = anchors(text)
    bad = [a for a in re.findall(r"(?<![\w/.])#([a-z0-9][a-z0-9-]*)", text) if a not in known]
    assert not bad, bad


def test_nothing_cites_the_old_references_file():
    hits = [f"{f.relative_to(ROOT)}:{no}"
            for f in _sources() + [ROOT / "DEVELOPERS.md", ROOT / "README.md"]
            for no, line in enumerate(f.read_text(encoding="utf-8").splitlines(), 1)
            if OLD.search(line)]
    assert not hits, "cite docs/references.md#<section> instead: " + ", ".join(hits)


def test_every_row_names_a_source():
    found = tables(DOC.read_text(encoding="utf-8"))
    assert len(found) >= 10
    empty = []
    for header, rows in found:
        assert "source" in header, header
        k = header.index("source")
        assert rows, header
        for no, cells in rows:
            if len(cells) != len(header) or not cells[k]:
                empty.append(f"docs/references.md:{no}")
    assert not empty, "rows without a source (or with a stray '|'): " + ", ".join(empty)


def test_files_named_in_the_used_in_column_exist():
    missing = []
    for header, rows in tables(DOC.read_text(encoding="utf-8")):
        if "used in" not in header:
            continue
        k = header.index("used in")
        for no, cells in rows:
            for name in re.findall(r"(?:tests|teffmc)/[\w/.]+\.\w+", cells[k]):
                if not (ROOT / name).is_file():
                    missing.append(f"docs/references.md:{no}: {name}")
    assert not missing, missing


@pytest.mark.parametrize("bad, reason", [
    ("| q | v |  | tests/x.py |", "empty source"),
    ("| q | v | a | b | c |", "stray '|'"),
])
def test_the_row_check_can_fail(bad, reason):
    text = "## T\n\n| quantity | value | source | used in |\n|---|---|---|---|\n" + bad + "\n"
    (header, rows), = tables(text)
    k = header.index("source")
    no, cells = rows[0]
    assert len(cells) != len(header) or not cells[k], reason

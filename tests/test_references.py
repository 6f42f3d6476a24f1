"""The one reference list: every cited key resolves, the generated docs page is current, and the
report takes its citations from the list (one paper, one citation)."""

from __future__ import annotations

from pathlib import Path

import pytest

from debrief import references as R

ROOT = Path(__file__).resolve().parents[1]
SCANNED = ("debrief", "templates", "docs", "tests")
TEXT_SUFFIXES = {".py", ".md", ".ipynb", ".toml", ".txt", ".rst", ".cfg", ".csv", ".json", ".geojson"}


def _texts():
    for top in SCANNED:
        for p in sorted((ROOT / top).rglob("*")):
            if p.is_file() and p.suffix in TEXT_SUFFIXES and "__pycache__" not in p.parts:
                yield p, p.read_text(encoding="utf-8", errors="replace")
    for name in ("README.md", "DEVELOPERS.md"):
        if (ROOT / name).is_file():
            yield ROOT / name, (ROOT / name).read_text(encoding="utf-8")


def test_every_cited_key_resolves():
    cited, unknown = {}, []
    for path, text in _texts():
        for m in R.KEY_PATTERN.finditer(text):
            key = m.group(1)
            cited.setdefault(key, path)
            if key not in R.REFERENCES:
                line = text.count("\n", 0, m.start()) + 1
                unknown.append(f"{path.relative_to(ROOT)}:{line}: [{key}]")
    assert not unknown, "keys missing from debrief/references.py:\n" + "\n".join(unknown)
    # the scan does find the citations (keys cited in module docstrings and docs/cc-reasons.md)
    assert {"Saba2010", "Eriksson1987", "Karney2013", "Holle1999", "Cummins1998", "IEEE1410"} <= set(cited)


def test_key_pattern():
    # citation keys, and things that are not keys (index expressions, intervals, markers)
    lettered = "Saba" + "2010a"  # a made-up key, not written as a citation in this file
    assert R.KEY_PATTERN.findall(f"[Saba2010]_ [IEEE1410] [CIGRE549] [{lettered}]") == [
        "Saba2010", "IEEE1410", "CIGRE549", lettered]
    assert R.KEY_PATTERN.findall('[X] [1] [0, 180) df["a2020"] [ns, UTC] [T0] [k2]') == []


def test_no_file_cites_an_outside_reference_file():
    name = "REFERENCES" + ".md"  # spelled in two parts so that this file does not match itself
    hits = [str(p.relative_to(ROOT)) for p, text in _texts() if name in text]
    assert hits == []


def test_docs_page_is_current():
    doc = (ROOT / "docs" / "references.md").read_text(encoding="utf-8")
    assert doc == R.document(), "regenerate docs/references.md: python -m debrief.references > docs/references.md"
    assert "- **[Saba2010]** Saba, M. M. F., Schulz, W." in doc


def test_citations():
    # the project's sources as stated in the list (DOIs as given there)
    assert "doi:10.1029/2010JD014330" in R.REFERENCES["Saba2010"]
    assert "High-speed video observations of positive lightning flashes to ground" in R.REFERENCES["Saba2010"]
    assert "doi:10.1007/s00190-012-0578-z" in R.REFERENCES["Karney2013"]
    assert "The incidence of lightning strikes to power lines" in R.REFERENCES["Eriksson1987"]
    assert "859-870" in R.REFERENCES["Eriksson1987"] and "from memory" in R.REFERENCES["Eriksson1987"]
    for key in ("BarShalom2001", "Garwood1936", "Hanley1983"):
        assert "from memory" in R.REFERENCES[key]
    assert "RFC 7946" in R.REFERENCES["RFC7946"]
    assert all(v.endswith(".") for v in R.REFERENCES.values())
    assert R.cite("Saba2010", "Karney2013") == f"[Saba2010] {R.REFERENCES['Saba2010']} [Karney2013] {R.REFERENCES['Karney2013']}"
    with pytest.raises(KeyError, match="Nobody"):
        R.cite("Nobody" + "1900")


def test_report_methods_take_citations_from_the_list():
    from debrief.report import content as rc

    methods = {topic: source for topic, _, source in rc.METHODS}
    assert methods["Continuing-current suspicion"].startswith(f"[Saba2010] {R.REFERENCES['Saba2010']}")
    assert methods["Direct strikes and induced overvoltage"] == R.cite("Rusck1958", "IEEE1410", "Eriksson1987")
    refs = rc.module_references("debrief.continuing_current")
    assert refs[0].startswith(f"[Saba2010] {R.REFERENCES['Saba2010']} Here: Long continuing current in 75%")
    assert [r.split("]")[0] + "]" for r in refs] == ["[Saba2010]", "[Saba2006]", "[Rakov1990]", "[Kitagawa1962]",
                                                     "[Ballarotti2005]"]
    # one paper, one citation: the report's text of a key is the list's text
    html = rc.methods_html()
    assert html.count("Saba, M. M. F., Schulz, W.") >= 2
    assert "Positive leader characteristics" not in html and "An improved electrogeometric" not in html

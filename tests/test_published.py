"""The table of published Efimov measurements (lossfit/published.py): columns, units,
signs, the a_-/r_vdW column against lossfit's r_vdW, full citations, the verification
marks of every item of every shipped row, and rows added by users from CSV files.

The shipped numbers are still quoted from memory (no page read states them: the
``checked`` column says so for each row); the authors of every row and the journal
references of three papers are verified at the addresses the rows name. The tests check
the table's consistency and its marks, not the papers.
"""

import math
import re
import sys

import pytest

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.published import COLUMNS, FROM_MEMORY, PROVENANCE_ITEMS, PUBLISHED_ROWS

CITATION = re.compile(r"^.+, (Nature|Science|Phys\. Rev\. Lett\.|Phys\. Rev\. A|Nat\. Phys\.) \d+, \d+ "
                      r"\((19|20)\d\d\)$")


def test_columns_units_signs_and_ratio():
    rows = lf.published_results(as_frame=False)
    assert len(rows) == len(PUBLISHED_ROWS) >= 5
    for row in rows:
        assert tuple(row) == COLUMNS
        sp = lf.species(row["species"])
        assert row["a_minus"] < 0                                      # a_- lies at a < 0 (a0)
        assert 0 < row["a_minus_err"] < abs(row["a_minus"])
        # a0: every a_- sits within a factor 2 of the van der Waals value -9.73 r_vdW
        assert 0.5 < row["a_minus"] / (-9.73 * sp.r_vdw) < 2.0
        assert row["a_minus_over_rvdw"] == row["a_minus"] / sp.r_vdw
        assert row["eta_minus"] is None or 0 < row["eta_minus"] < 1
        assert row["temperature_nK"] is None or 0 < row["temperature_nK"] < 1e4
        assert math.isfinite(row["field_G"])
        assert CITATION.match(row["citation"]), row["citation"]          # authors, journal volume, page (year)
        assert "from memory" in row["checked"]                           # no number verified in a paper's text


ADDRESS = re.compile(r"^https?://\S+$")
MEMORY_MARK = f"{FROM_MEMORY} (stated by no page read): "


def _addresses(where):
    return () if where == FROM_MEMORY else ((where,) if isinstance(where, str) else tuple(where))


def _named(label, text):
    """``label`` as a whole name in ``text`` (a_minus is not named by a_minus_err)."""
    return re.search(rf"(?<!\w){re.escape(label)}(?!\w)", text) is not None


def test_every_item_of_every_row_is_verified_at_an_address_or_from_memory():
    rows = lf.published_results(as_frame=False)
    assert len(set(PROVENANCE_ITEMS.values())) == len(PROVENANCE_ITEMS)   # each item has its own words
    for entry, row in zip(PUBLISHED_ROWS, rows):
        provenance = entry[-1]
        # the items: authors, journal reference, and every number the row gives (no more, no fewer)
        given = {k for k in ("eta_minus", "temperature_nK") if row[k] is not None}
        assert set(provenance) == {"authors", "journal_ref", "field_G", "a_minus", "a_minus_err"} | given
        verified_text, _, memory_text = row["checked"].partition(". " + MEMORY_MARK)
        if not verified_text.startswith("verified: "):               # nothing verified: the mark opens the text
            verified_text, memory_text = "", row["checked"].partition(MEMORY_MARK)[2]
        read = []
        for item, where in provenance.items():
            label = PROVENANCE_ITEMS[item]
            if where == FROM_MEMORY:
                assert _named(label, memory_text) and not _named(label, verified_text), (item, row["checked"])
                continue
            addresses = _addresses(where)
            assert addresses and all(ADDRESS.match(a) for a in addresses), where
            assert _named(label, verified_text) and not _named(label, memory_text), (item, row["checked"])
            assert " and ".join(addresses) in verified_text
            read += [a for a in addresses if a not in read]
        # source_checked lists exactly the addresses read, once each, in order
        assert row["source_checked"].split() == read
        # the mark "from memory" appears exactly when an item is from memory
        assert (FROM_MEMORY in row["checked"]) == (FROM_MEMORY in provenance.values())


def test_what_was_verified_where():
    rows = lf.published_results(as_frame=False)
    numbers = {"field_G", "a_minus", "a_minus_err", "eta_minus", "temperature_nK"}
    verified = [{k for k, w in entry[-1].items() if w != FROM_MEMORY} for entry in PUBLISHED_ROWS]
    # no number of any row is stated by a page read: all are still from memory
    assert all(not (v & numbers) for v in verified)
    # the authors of every row; the journal reference of all but the 85Rb paper
    assert [sorted(v) for v in verified] == [["authors", "journal_ref"]] * 5 + [["authors"]] + \
        [["authors", "journal_ref"]]
    # where: Kraemer et al. at the arXiv abstract page, the journal reference at the publisher's
    # page and a later paper's abstract citing "Nature (London) 440, 315 (2006)"
    kraemer = PUBLISHED_ROWS[0][-1]
    assert kraemer["authors"] == "https://arxiv.org/abs/cond-mat/0512394"
    assert kraemer["journal_ref"] == ("https://www.nature.com/articles/nature04626",
                                      "https://tomesphere.com/paper/cond-mat/0702178")
    # Berninger et al.: all four rows at the publisher's abstract page
    for row in rows[1:5]:
        assert row["source_checked"] == "http://link.aps.org/doi/10.1103/PhysRevLett.107.120401"
        assert row["citation"].endswith("Phys. Rev. Lett. 107, 120401 (2011)")
    # Wild et al.: the authors only; Gross et al.: the journal reference in the abstract of the next paper
    assert rows[5]["source_checked"] == "https://tomesphere.com/paper/1112.0362"
    assert "journal reference (journal, volume, page, year)" in rows[5]["checked"].split(FROM_MEMORY)[1]
    assert rows[6]["source_checked"].split() == ["https://www.arxiv-vanity.com/papers/0906.4731/",
                                                 "https://www.arxiv-vanity.com/papers/1003.4891/"]


def test_no_potassium_39_and_the_species_known():
    rows = lf.published_results(as_frame=False)
    assert "39K" not in {r["species"] for r in rows}
    assert {r["species"] for r in rows} <= set(lf.known_species())


def test_a_known_row():
    # Kraemer et al., Nature 440, 315 (2006): a_- = -850(20) a0, eta_- = 0.06 at 10 nK (from memory)
    row = lf.published_results(as_frame=False)[0]
    assert (row["species"], row["a_minus"], row["a_minus_err"], row["eta_minus"], row["temperature_nK"]) == \
        ("133Cs", -850.0, 20.0, 0.06, 10.0)
    assert row["a_minus_over_rvdw"] == pytest.approx(-850.0 / lf.species("133Cs").r_vdw, rel=1e-15)
    assert row["citation"].endswith("Nature 440, 315 (2006)")


def test_dataframe_when_pandas_is_installed():
    pd = pytest.importorskip("pandas")
    frame = lf.published_results()
    assert isinstance(frame, pd.DataFrame)
    assert list(frame.columns) == list(COLUMNS)
    assert (frame["a_minus"] < 0).all()


def test_list_of_dicts_without_pandas(monkeypatch):
    monkeypatch.setitem(sys.modules, "pandas", None)                   # import pandas now fails
    rows = lf.published_results()
    assert isinstance(rows, list) and tuple(rows[0]) == COLUMNS
    with pytest.raises(LossfitValueError, match="pandas"):
        lf.published_results(as_frame=True)


def test_rows_from_a_csv_file(tmp_path):
    path = tmp_path / "mine.csv"
    path.write_text("species,field_G,a_minus,a_minus_err,eta_minus,temperature_nK,citation\n"
                    "87Rb,1007.4,-800,40,,55,an invented row for this test\n", encoding="utf-8")
    rows = lf.published_results(extra=path, as_frame=False)
    mine = rows[-1]
    assert len(rows) == len(PUBLISHED_ROWS) + 1
    assert mine["species"] == "87Rb" and mine["eta_minus"] is None and mine["temperature_nK"] == 55.0
    assert mine["a_minus_over_rvdw"] == -800.0 / lf.species("87Rb").r_vdw
    assert mine["checked"] == "" and mine["source_checked"] == ""
    # and from a list of dicts
    rows = lf.published_results(extra=[{"species": "7Li", "field_G": 737.7, "a_minus": -250.0, "a_minus_err": 10.0,
                                        "citation": "another invented row", "checked": "a_minus in the text",
                                        "source_checked": " https://example.org/invented "}], as_frame=False)
    assert (rows[-1]["checked"], rows[-1]["source_checked"]) == ("a_minus in the text", "https://example.org/invented")
    assert rows[-1]["a_minus_over_rvdw"] == -250.0 / lf.species("7Li").r_vdw


@pytest.mark.parametrize("line, message", [
    ("133Cs,0,900,10,,,x", "a_minus must be negative"),
    ("133Cs,0,-900,-1,,,x", "a_minus_err must be >= 0"),
    ("133Cs,0,abc,10,,,x", "must be a number"),
    ("133Cs,0,-900,10,,,", "citation"),
    ("Xx99,0,-900,10,,,x", "unknown species"),
])
def test_bad_csv_rows_are_refused_with_the_line(tmp_path, line, message):
    path = tmp_path / "bad.csv"
    path.write_text("species,field_G,a_minus,a_minus_err,eta_minus,temperature_nK,citation\n" + line + "\n",
                    encoding="utf-8")
    with pytest.raises(LossfitValueError, match=message) as info:
        lf.published_results(extra=path)
    assert "line 2" in str(info.value) and info.value.argument == "extra"


def test_bad_extra_arguments(tmp_path):
    with pytest.raises(LossfitValueError, match="no such file"):
        lf.published_results(extra=tmp_path / "missing.csv")
    (tmp_path / "cols.csv").write_text("species,a_minus\n133Cs,-900\n", encoding="utf-8")
    with pytest.raises(LossfitValueError, match="missing column"):
        lf.published_results(extra=tmp_path / "cols.csv")
    with pytest.raises(LossfitValueError, match="CSV path or a list of dicts"):
        lf.published_results(extra=42)

"""The table of published Efimov measurements (lossfit/published.py): columns, units,
signs, the a_-/r_vdW column against lossfit's r_vdW, full citations, and rows added by
users from CSV files.

The shipped numbers are quoted from memory (the table's ``checked`` column says so for
each row); the tests check the table's consistency, not the papers.
"""

import math
import re
import sys

import pytest

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.published import COLUMNS, PUBLISHED_ROWS

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
        assert "from memory" in row["checked"]                           # nothing verified in a paper's text


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
    assert mine["checked"] == ""
    # and from a list of dicts
    rows = lf.published_results(extra=[{"species": "7Li", "field_G": 737.7, "a_minus": -250.0, "a_minus_err": 10.0,
                                        "citation": "another invented row"}], as_frame=False)
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

"""Reading specimen tables: parsing, grouping, and one-line errors that say where and what to do."""
import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix.study import parse_group_option, read_study


def write(tmp_path, text, name="bars.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_origins_unknown_ambiguous_and_survivors(tmp_path):
    p = write(tmp_path, "specimen,strength,origin,status,batch\n"
                        "A1,410,pore,failed,7\nA2,380, Machining  Damage ,,7\nA3,420,?,failed,7\n"
                        "A4,405,pore|machining damage,failed,8\nA5,450,,survived,8\nA6,399,unknown,failed,8\n")
    sp = fm.read_specimens(p, {"pores": {"kind": "volume", "labels": ["pore"]},
                               "machining": {"kind": "surface", "labels": ["machining damage"]}})
    assert sp.population_names == ("pores", "machining")
    assert sp.n_specimens == 6 and sp.n_survived == 1 and sp.n_failed == 5
    assert sp.n_unidentified == 2
    assert sp.n_ambiguous == 1
    np.testing.assert_array_equal(sp.certain_failures(), [1, 1])
    assert "batch" in sp.table.columns           # extra columns pass through
    np.testing.assert_array_equal(sp.candidates[4], [False, False])  # survivor


def test_without_grouping_each_label_is_its_own_population_sorted():
    sp = fm.read_specimens(pd.DataFrame({"strength": [1, 2, 3.0], "origin": ["Pore", "edge chip", "pore"]}))
    assert sp.population_names == ("edge chip", "pore")
    assert all(p.kind == "unspecified" for p in sp.populations)


def test_unit_is_recorded_and_checked():
    sp = fm.read_specimens(pd.DataFrame({"strength": [1.0, 2.0]}), unit="gpa")
    assert sp.unit == "GPa"
    with pytest.raises(fm.FlawmixError, match="unknown stress unit 'bar'"):
        fm.read_specimens(pd.DataFrame({"strength": [1.0]}), unit="bar")


@pytest.mark.parametrize("body, message", [
    ("strength,origin\n400,pore\n,pore\n", r"bars.csv, line 3, column 'strength': missing value"),
    ("strength,origin\n400,pore\nabc,pore\n", r"line 3, column 'strength': 'abc' is not a number"),
    ("strength,origin\n400,pore\n-5,pore\n", r"line 3, column 'strength': -5 is not positive"),
    ("strength,origin\n400,pore\ninf,pore\n", r"line 3, column 'strength': 'inf' is not a finite number"),
    ("strength,origin\n400,pore\nnan,pore\n", r"line 3, column 'strength': missing value"),
    ("strength,status\n400,failed\n300,broke\n", r"line 3, column 'status': unknown status 'broke'"),
    ("specimen,strength\nA,400\nB,300\nA,350\n", r"line 4, column 'specimen': duplicate specimen id 'A' \(first at line 2\)"),
    ("stress,origin\n400,pore\n", r"no 'strength' column \(found: stress, origin\)"),
    ("strength,origin\n", r"the table has no specimens"),
    ("", r"the file is empty"),
])
def test_bad_input_names_file_line_column_and_fix(tmp_path, body, message):
    p = write(tmp_path, body)
    with pytest.raises(fm.FlawmixError, match=message) as info:
        fm.read_specimens(p)
    assert "\n" not in str(info.value)


def test_unknown_origin_labels_are_all_listed(tmp_path):
    p = write(tmp_path, "strength,origin\n400,pore\n300,inclusion\n350,chip|pore\n")
    with pytest.raises(fm.FlawmixError) as info:
        fm.read_specimens(p, {"pores": {"labels": ["pore"]}})
    text = str(info.value)
    assert "'inclusion' (line 3)" in text and "'chip' (line 4)" in text and "column 'origin'" in text


def test_label_given_to_two_populations_is_an_error():
    with pytest.raises(fm.FlawmixError, match="given to both"):
        fm.read_specimens(pd.DataFrame({"strength": [1.0]}), {"a": {"labels": ["x"]}, "b": {"labels": ["X "]}})


def test_input_file_is_not_modified(tmp_path):
    p = write(tmp_path, "strength,origin\n400,pore\n300,?\n350,pore\n")
    before = p.read_bytes()
    fm.fit(fm.read_specimens(p), intervals="none")
    assert p.read_bytes() == before


def test_excel_workbook(tmp_path):
    pytest.importorskip("openpyxl")
    frame = pd.DataFrame({"specimen": ["a", "b", "c"], "strength": [400, 300, 350], "origin": ["pore", "?", "pore"]})
    path = tmp_path / "bars.xlsx"
    frame.to_excel(path, index=False)
    sp = fm.read_specimens(path)
    np.testing.assert_allclose(sp.strength, [400, 300, 350])
    assert sp.n_unidentified == 1


def test_study_file_and_group_option(tmp_path):
    study = write(tmp_path, 'unit = "ksi"\nconfidence = 0.95\n[populations.pores]\nkind = "volume"\n'
                            'labels = ["pore", "void"]\n', name="study.toml")
    s = read_study(study)
    assert s.unit == "ksi" and s.confidence == 0.95 and s.populations[0].labels == ("pore", "void")
    assert parse_group_option("pores:volume=pore, void") == ("pores", {"kind": "volume", "labels": ["pore", "void"]})
    bad = write(tmp_path, 'colour = "red"\n', name="bad.toml")
    with pytest.raises(fm.FlawmixError, match="unknown key"):
        read_study(bad)


def test_shipped_demo_data_is_what_the_generator_makes():
    import subprocess, sys
    from pathlib import Path
    script = Path(__file__).resolve().parents[1] / "scripts" / "make_demo_data.py"
    assert subprocess.run([sys.executable, str(script), "--check"]).returncode == 0


def test_a_sequence_of_strengths_is_one_complete_population():
    """fm.fit(array) is the textbook case: the same fit as a table with only a strength column,
    and its modulus is scipy's weibull_min.fit with floc=0 (an outside reference)."""
    from scipy import stats

    x = 400.0 * np.random.default_rng(3).weibull(9.0, 40)
    a, b, c = fm.fit(x), fm.fit(list(x)), fm.fit(pd.DataFrame({"strength": x}))
    assert a.moduli == pytest.approx(b.moduli, rel=1e-14)
    assert a.moduli == pytest.approx(c.moduli, rel=1e-14)
    assert a.populations[0].modulus_interval == pytest.approx(c.populations[0].modulus_interval, rel=1e-14)
    m, _, s = stats.weibull_min.fit(x, floc=0)
    assert a.moduli[0] == pytest.approx(m, rel=1e-4)
    assert a.populations[0].characteristic_strength == pytest.approx(s, rel=1e-4)


@pytest.mark.parametrize("bad, words", [(np.ones((3, 2)), "one-dimensional"), ({"strength": 1}, "a dict"),
                                        (5.0, "a float")])
def test_what_is_not_a_table_or_strengths_is_named(bad, words):
    with pytest.raises(fm.FlawmixError, match=words):
        fm.fit(bad)

"""Case records: the file format, its round trip, and every kind of bad input it refuses.

Each refusal names the file, and for the CSV the row and the column; nothing is half-written.
"""

from pathlib import Path

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.validation import InputError
from circlesim.cases.columns import MeasuredSeries
from circlesim.cases.fit import FitError, fit_case
from circlesim.cases.record import Monitor, load_case, load_cases
from circlesim.cases.synthetic import synthetic_case, write_case

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
TOML = """
title = "bad input"
[patient]
weight_kg = 70
height_cm = 175
age_years = 50
sex = "male"
[vaporizer]
agent = "sevoflurane"
[record]
measurements = "case.csv"
source = "invented for a test"
"""
GOOD_CSV = """time_min,o2_l_min,air_l_min,dial_percent,end_tidal_sevoflurane_pct,inspired_oxygen_pct
0,1,1,2,,
1,,,,0.8,55
2,,,,1.1,56
"""


def _write(tmp_path, csv_text, toml_text=TOML):
    (tmp_path / "case.toml").write_text(toml_text, encoding="utf-8")
    (tmp_path / "case.csv").write_text(csv_text, encoding="utf-8")
    return tmp_path / "case.toml"


def test_good_record_reads(tmp_path):
    record = load_case(_write(tmp_path, GOOD_CSV))
    assert record.plan.steps[0].o2_l_min == 1.0 and record.plan.steps[0].dial_percent == 2.0
    assert list(record.time_min) == [1.0, 2.0]
    et = record.measured[MeasuredSeries("end_tidal", "sevoflurane")]
    assert list(et) == [0.8, 1.1]
    assert record.source == "invented for a test"


def test_irregular_sampling_gaps_and_settings_when_they_change(tmp_path):
    csv = ("time_min,o2_l_min,air_l_min,dial_percent,end_tidal_sevoflurane_pct,"
           "end_tidal_oxygen_pct\n"
           "0,3,3,2,,\n0.17,,,,0.2,\n0.5,,,,,60\n7.9,,,,1.6,55\n8,0.3,0.2,,,\n"
           "31.25,,,3,1.4,\n")
    record = load_case(_write(tmp_path, csv))
    assert [s.time_min for s in record.plan.steps] == [0.0, 8.0, 31.25]
    assert record.plan.steps[1].dial_percent is None  # unchanged: the dial stays at 2 %
    o2 = record.measured[MeasuredSeries("end_tidal", "oxygen")]
    assert np.isnan(o2[0]) and o2[1] == 60.0


@pytest.mark.parametrize("csv,expected", [
    ("time_min,o2_l_min\n0,1,2\n", "row 2: 3 cells, but the header has 2 columns"),
    ("time_min,o2_l_min,banana_pct\n0,1,2\n", "unknown column 'banana_pct'"),
    ("time_min,o2_l_min,o2_l_min\n0,1,1\n", "column 'o2_l_min' appears twice"),
    ("time_min,o2_l_min,end_tidal_sevoflurane_pct\n0,1,\n1,,abc\n",
     "row 3, column 'end_tidal_sevoflurane_pct': 'abc' is not a number"),
    ("time_min,o2_l_min,end_tidal_sevoflurane_pct\n0,1,\n2,,1\n1,,1\n",
     "row 4, column 'time_min': time goes backwards"),
    ("time_min,o2_l_min,end_tidal_oxygen_pct\n0,1,\n1,,120\n",
     "row 3, column 'end_tidal_oxygen_pct': 120 vol% is outside 0 to 100 vol%"),
    ("time_min,o2_l_min,end_tidal_isoflurane_pct\n0,1,\n1,,1\n",
     "uses sevoflurane, but this column measures isoflurane"),
    ("time_min,end_tidal_sevoflurane_pct\n0,1\n", "the first row must give the fresh gas flows"),
    ("time_min,o2_l_min\n0,-1\n", "row 2, column 'o2_l_min': -1 L/min is outside 0 to 15"),
    ("o2_l_min\n1\n", "the column 'time_min' is missing"),
    ("time_min,o2_l_min\n,1\n", "row 2, column 'time_min': the time is empty"),
])
def test_bad_csv_is_refused_naming_file_row_and_column(tmp_path, csv, expected):
    with pytest.raises(InputError) as info:
        load_case(_write(tmp_path, csv))
    assert expected in str(info.value)
    assert "case.csv" in str(info.value) or "case.toml" in str(info.value)


@pytest.mark.parametrize("toml,expected", [
    (TOML.replace("[record]", "[recrod]"), "[record] measurements must name the CSV"),
    (TOML + "flavour = 1\n", "[record] has unknown setting 'flavour'"),
    (TOML.replace("[patient]\n", "[[plan.steps]]\n"), "takes its plan from the CSV"),
    (TOML + "[extras]\nx = 1\n", "unknown section or key 'extras'"),
    (TOML.replace("weight_kg = 70", "weight_kg = 700"), "Patient.weight_kg"),
])
def test_bad_toml_is_refused(tmp_path, toml, expected):
    with pytest.raises(InputError) as info:
        load_case(_write(tmp_path, GOOD_CSV, toml))
    assert expected in str(info.value)


def test_missing_patient_is_refused(tmp_path):
    text = TOML.replace("[patient]\nweight_kg = 70\nheight_cm = 175\nage_years = 50\n"
                        "sex = \"male\"\n", "")
    with pytest.raises(InputError, match=r"\[patient\] section is missing"):
        load_case(_write(tmp_path, GOOD_CSV, text))


def test_folder_is_not_a_record(tmp_path):
    with pytest.raises(InputError, match="is a folder"):
        load_case(tmp_path)


def test_too_few_points_to_fit(tmp_path):
    record = load_case(_write(tmp_path, GOOD_CSV.replace("2,,,,1.1,56\n", "")
                              .replace("0.8,55", "0.8,")))
    with pytest.raises(InputError) as info:
        fit_case(record)
    assert "case.toml" in str(info.value) and "needs at least 2" in str(info.value)


def test_fit_that_does_not_converge_says_so():
    scenario = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
    record, _ = synthetic_case(scenario, interval_min=2.0, seed=3, name="short")
    with pytest.raises(FitError, match="did not converge in 5 iterations"):
        fit_case(record, max_iterations=5)


def test_round_trip_through_files(tmp_path):
    scenario = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
    record, _ = synthetic_case(scenario, interval_min=0.5, monitor=Monitor(6.0), seed=1,
                               name="trip")
    path = write_case(record, tmp_path)
    again = load_case(path)
    assert again.monitor == record.monitor
    assert [s.to_dict() | {"note": ""} for s in again.plan.steps] == [
        s.to_dict() | {"note": ""} for s in record.plan.steps]  # notes stay in the scenario
    for series, values in record.measured.items():
        np.testing.assert_allclose(again.measured[series], values, atol=1e-9)
    with pytest.raises(FileExistsError):
        write_case(record, tmp_path)  # never replaced unless asked
    write_case(record, tmp_path, overwrite=True)


def test_folder_of_records_lists_broken_ones(tmp_path):
    scenario = cs.load_scenario(SCENARIOS / "flow_reduction_sevoflurane.toml")
    record, _ = synthetic_case(scenario, interval_min=5.0, seed=2, name="good")
    write_case(record, tmp_path)
    (tmp_path / "broken.toml").write_text(TOML.replace("case.csv", "missing.csv"))
    records, problems = load_cases(tmp_path)
    assert [r.name for r in records] == ["good"]
    assert problems[0][0].name == "broken.toml" and "does not exist" in problems[0][1]
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputError, match="holds no case records"):
        load_cases(empty)

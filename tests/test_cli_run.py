"""`circlesim run` on every scenario, and the result's table and CSV export."""

from pathlib import Path

import pandas as pd
import pytest

import circlesim as cs
from circlesim.cli import main

SCENARIOS = sorted(Path(__file__).resolve().parents[1].joinpath("scenarios").glob("*.toml"))


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_run_every_scenario(path, tmp_path, capsys):
    csv = tmp_path / f"{path.stem}.csv"
    assert main(["run", str(path), "--csv", str(csv)]) == 0
    out = capsys.readouterr().out
    assert "not a medical device" in out
    assert "End-tidal target" in out
    table = pd.read_csv(csv)
    assert table["time_min"].iloc[0] == 0.0
    assert table.notna().all().all()


def test_run_never_overwrites_without_asking(tmp_path, capsys):
    path = SCENARIOS[0]
    csv = tmp_path / "out.csv"
    csv.write_text("precious user data\n")
    assert main(["run", str(path), "--csv", str(csv)]) == 0
    assert csv.read_text() == "precious user data\n"
    written = tmp_path / "out-1.csv"
    assert written.exists()
    assert main(["run", str(path), "--csv", str(csv), "--overwrite"]) == 0
    assert csv.read_text() != "precious user data\n"


def test_run_reports_bad_scenario_clearly(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[plan]\nduration_min = 10\n[[plan.steps]]\ntime_min = 0\no2_l_min = 99\n")
    assert main(["run", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "Step.o2_l_min must be a number from 0 to 15 L/min; got 99" in err
    assert "Traceback" not in err


def test_frame_has_units_in_column_names(adult):
    plan = cs.Plan([cs.Step(0, o2_l_min=1, air_l_min=1, dial_percent=2)], duration_min=10)
    frame = cs.simulate(adult, cs.Circuit(), plan).frame()
    for column in ("time_min", "inspired_oxygen_pct", "end_tidal_sevoflurane_pct",
                   "vessel_rich_sevoflurane_pct", "mixed_venous_nitrogen_pct",
                   "fresh_gas_l_min", "vented_l_min", "bag_volume_l",
                   "uptake_sevoflurane_ml_min_stpd", "sevoflurane_delivered_ml_liquid",
                   "end_tidal_sevoflurane_mac", "brain_sevoflurane_kpa"):
        assert column in frame.columns


def test_csv_export_is_atomic_and_respects_existing_files(adult, tmp_path):
    plan = cs.Plan([cs.Step(0, o2_l_min=1, dial_percent=2)], duration_min=5)
    result = cs.simulate(adult, cs.Circuit(), plan)
    target = tmp_path / "r.csv"
    result.to_csv(target)
    with pytest.raises(FileExistsError):
        result.to_csv(target)
    assert not list(tmp_path.glob(".*tmp"))  # no temporary files left behind

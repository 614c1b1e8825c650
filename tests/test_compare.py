"""Comparisons of plans and the scenario library: `circlesim compare`, its report and errors."""

import re
import tomllib
from pathlib import Path

import pytest

import circlesim as cs
from circlesim.cli import main
from circlesim.domain.costs import Prices
from circlesim.outcomes.comparison import compare, compare_files, find_scenario_files
from circlesim.scenario import scenario_from_toml

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
WASH_IN = sorted(SCENARIOS.glob("wash_in_*.toml"))
CARRIERS = sorted(SCENARIOS.glob("carrier_*.toml"))


# ---- the scenario library -------------------------------------------------------------------
def test_library_has_the_cases_the_issue_asks_for():
    names = {p.stem for p in SCENARIOS.glob("*.toml")}
    assert len(names) >= 8
    for required in ("adult_flow_reduction_sevoflurane", "wash_in_high_flow_then_reduce",
                     "wash_in_overpressure_low_flow", "wash_in_fixed_low_flow",
                     "wash_in_closed_liquid_injection", "carrier_air_oxygen_0_5",
                     "carrier_nitrous_oxide_0_5", "elderly_isoflurane", "child_sevoflurane",
                     "obesity_sevoflurane", "long_case_isoflurane", "desflurane_low_flow"):
        assert required in names


@pytest.mark.parametrize("path", sorted(SCENARIOS.glob("*.toml")), ids=lambda p: p.stem)
def test_every_scenario_states_its_question_and_runs(path, tmp_path, capsys):
    text = path.read_text(encoding="utf-8")
    assert text.startswith("# Question:"), "the file must open with a comment naming its question"
    data = tomllib.loads(text)
    assert data.get("question", "").strip()
    assert main(["run", str(path), "--csv", str(tmp_path / "run.csv")]) == 0
    out = capsys.readouterr().out
    assert "CAUTION" in out and (tmp_path / "run.csv").exists()


def test_example_prices_are_labelled_as_invented():
    for path in SCENARIOS.glob("*.toml"):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        if "prices" in data:
            assert "INVENTED" in data["prices"].get("note", ""), path.name


def test_wash_in_set_differs_as_intended():
    # The closed-circuit strategy uses the least liquid agent, the fixed low flow is the
    # slowest to reach the target (what the set is built to show; the numbers are the model's).
    comparison = compare_files(WASH_IN)
    by = {p.label: p.summary for p in comparison.plans}
    closed = by["wash_in_closed_liquid_injection"].agent_delivered_ml
    assert closed == min(s.agent_delivered_ml for s in by.values())
    slowest = max(by.values(), key=lambda s: s.time_to_target_min or float("inf"))
    assert slowest is by["wash_in_fixed_low_flow"]


# ---- the comparison API -------------------------------------------------------------------------
def test_compare_table_has_one_row_per_plan_and_reproducible_inputs():
    comparison = compare_files(WASH_IN, gwp_horizon=100)
    table = comparison.table()
    assert list(table["plan"]) == [p.stem for p in WASH_IN]
    assert "CO2-eq total (GWP100), kg" in table.columns
    assert "cost total (example units)" in table.columns
    # The inputs text holds every scenario; each block parses back to the same scenario.
    blocks = re.split(r"^# ===== .*=====$", comparison.inputs_toml(), flags=re.M)[1:]
    assert len(blocks) == len(WASH_IN)
    for block, plan in zip(blocks, comparison.plans, strict=True):
        assert scenario_from_toml(block) == plan.scenario


def test_report_settings_of_the_first_file_apply_and_a_note_says_so(tmp_path):
    first = cs.load_scenario(WASH_IN[0])
    text = WASH_IN[1].read_text(encoding="utf-8").replace("target_end_tidal_mac = 1.0",
                                                          "target_end_tidal_mac = 1.3")
    other = tmp_path / "other.toml"
    other.write_text(text, encoding="utf-8")
    comparison = compare_files([WASH_IN[0], other])
    assert all(p.summary.target_end_tidal_mac == first.report.target_end_tidal_mac
               for p in comparison.plans)
    assert comparison.notes and WASH_IN[0].stem in comparison.notes[0]


def _variant(tmp_path, source: Path, name: str, old: str, new: str) -> Path:
    text = source.read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / name
    path.write_text(text.replace(old, new, 1), encoding="utf-8")
    return path


def test_plans_for_different_patients_are_refused_naming_the_difference(tmp_path):
    older = _variant(tmp_path, WASH_IN[0], "older.toml", "age_years = 45", "age_years = 80")
    with pytest.raises(cs.InputError, match=r"patient\.age_years \(80\.0 instead of 45\.0\)"):
        compare_files([WASH_IN[0], older])
    bigger = _variant(tmp_path, WASH_IN[0], "bigger.toml", "volume_l = 3.0", "volume_l = 5.0")
    with pytest.raises(cs.InputError, match=r"circuit\.volume_l"):
        compare_files([WASH_IN[0], bigger])


def test_empty_folder_and_pattern_and_missing_file_are_refused(tmp_path):
    with pytest.raises(cs.InputError, match="holds no scenario files"):
        find_scenario_files([tmp_path])
    with pytest.raises(cs.InputError, match="matches no scenario file"):
        find_scenario_files([str(tmp_path / "*.toml")])
    with pytest.raises(cs.InputError, match="does not exist"):
        find_scenario_files([tmp_path / "nothing.toml"])
    with pytest.raises(cs.InputError, match="at least one"):
        find_scenario_files([])
    with pytest.raises(cs.InputError, match="at least one"):
        compare([])


def test_folder_and_pattern_expand_in_sorted_order(tmp_path):
    for p in WASH_IN[:2]:
        (tmp_path / p.name).write_text(p.read_text(encoding="utf-8"), encoding="utf-8")
    assert [p.name for p in find_scenario_files([tmp_path])] == [p.name for p in WASH_IN[:2]]
    assert find_scenario_files([str(tmp_path / "wash_in_*.toml")]) == find_scenario_files(
        [tmp_path])


def test_one_price_for_plans_with_different_agents_is_refused():
    pair = [SCENARIOS / "wash_in_high_flow_then_reduce.toml",
            SCENARIOS / "desflurane_low_flow.toml"]
    with pytest.raises(cs.InputError, match="needs one agent"):
        compare_files(pair, prices=Prices(agent_price_per_bottle=50.0, bottle_ml=250.0))
    # each file's own [prices] may differ between agents
    comparison = compare_files(pair)
    assert all(p.summary.cost is not None for p in comparison.plans)


def test_prices_in_different_currencies_are_refused(tmp_path):
    other = _variant(tmp_path, WASH_IN[1], "other.toml", 'currency = "example units"',
                     'currency = "other units"')
    with pytest.raises(cs.InputError, match="share a currency"):
        compare_files([WASH_IN[0], other])


# ---- the command line ---------------------------------------------------------------------------
def test_cli_compare_prints_the_table_and_writes_a_report(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", *map(str, WASH_IN), "--csv", "out/table.csv"]) == 0
    out = capsys.readouterr().out
    lines = out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.startswith("plan "))
    assert [line.split()[0] for line in lines[header + 2:header + 2 + len(WASH_IN)]] == [
        p.stem for p in WASH_IN]
    assert "CAUTION" in out
    report = tmp_path / "out" / "compare.html"
    html = report.read_text(encoding="utf-8")
    for p in WASH_IN:
        assert p.stem in html
    assert "not a medical device" in html
    assert "Inputs (to reproduce this report)" in html
    assert "--gwp-horizon 20" in html
    assert "plotly" in html.lower() and "Warnings: wash_in_closed_liquid_injection" in html
    table = (tmp_path / "out" / "table.csv").read_text(encoding="utf-8").splitlines()
    assert len(table) == 1 + len(WASH_IN)


def test_cli_never_overwrites_a_report_unless_asked(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    target = tmp_path / "mine.html"
    target.write_text("my own file", encoding="utf-8")
    args = ["compare", *map(str, CARRIERS), "--report", str(target)]
    assert main(args) == 0
    assert target.read_text(encoding="utf-8") == "my own file"
    assert (tmp_path / "mine-1.html").exists()
    assert "mine-1.html" in capsys.readouterr().out
    assert main([*args, "--overwrite"]) == 0
    assert "Caution" in target.read_text(encoding="utf-8")
    assert not (tmp_path / "mine-2.html").exists()


def test_cli_no_report(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", str(SCENARIOS / "carrier_*.toml"), "--no-report"]) == 0
    assert not (tmp_path / "out").exists()
    assert "carrier_nitrous_oxide_0_5" in capsys.readouterr().out


@pytest.mark.parametrize(("extra", "message"), [
    (["--gwp-horizon", "50"], "gwp_horizon must be one of 20, 100"),
    (["--price-per-bottle", "-3", "--bottle-ml", "250"], "Prices.agent_price_per_bottle"),
    (["--price-per-bottle", "30"], "Prices.bottle_ml"),
])
def test_cli_bad_options_give_a_clear_error(extra, message, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", *map(str, CARRIERS), "--no-report", *extra]) == 2
    assert message in capsys.readouterr().err


def test_cli_refuses_different_patients_and_empty_folders(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", str(SCENARIOS / "child_sevoflurane.toml"),
                 str(SCENARIOS / "elderly_isoflurane.toml"), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert "same patient" in err and "patient.age_years" in err
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["compare", str(empty)]) == 2
    assert "holds no scenario files" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()

"""Department flow rules: the shipped examples load; bad rule files, prices and folders are refused
with the file, the key, the value and what is allowed."""

import math
from dataclasses import fields
from pathlib import Path

import pytest

from circlesim.base.validation import InputError, Interval
from circlesim.department.rule import (
    FlowRule,
    RuleStep,
    WarningResponse,
    load_rule,
    rule_from_dict,
)
from circlesim.department.usage import load_prices, prices_from_dict

ROOT = Path(__file__).resolve().parents[1]
RULES = sorted((ROOT / "scenarios" / "department" / "rules").glob("*.toml"))
GOOD = {"name": "test", "min_fresh_o2_fraction": 0.5,
        "steps": [{"o2_l_min": 2.0, "air_l_min": 2.0, "until_end_tidal_fraction": 0.8,
                   "at_most_min": 15},
                  {"o2_l_min": 0.3, "air_l_min": 0.2}],
        "respond": {"on": ["fio2_low", "bag_empty"], "raise_to_l_min": 1.0}}


def _with(**changes):
    data = {**GOOD, "steps": [dict(s) for s in GOOD["steps"]], "respond": dict(GOOD["respond"])}
    for key, value in changes.items():
        data[key] = value
    return data


def test_two_or_three_example_rules_ship_and_load():
    assert 2 <= len(RULES) <= 3
    for path in RULES:
        rule = load_rule(path)
        assert "invented" in rule.name.lower() or "invented" in rule.note.lower()
        assert rule.describe()
        # every example round-trips through its plain-data form
        assert rule_from_dict(rule.to_dict()).to_dict() == rule.to_dict()


def test_every_rule_key_is_documented():
    doc = (ROOT / "docs" / "department-review.md").read_text(encoding="utf-8")
    keys = {f.name for kind in (FlowRule, RuleStep, WarningResponse) for f in fields(kind)}
    keys -= {"path"}
    missing = sorted(k for k in keys if f"`{k}`" not in doc)
    assert not missing, missing


def _declared():
    required = {RuleStep: {"o2_l_min": 1.0}, WarningResponse: {},
                FlowRule: {"steps": (RuleStep(o2_l_min=1.0),)}}
    for kind, base in required.items():
        for f in fields(kind):
            constraint = f.metadata.get("constraint")
            if isinstance(constraint, Interval):
                for bad in constraint.invalid_examples():
                    yield pytest.param(kind, base, f.name, bad, constraint,
                                       id=f"{kind.__name__}.{f.name}={bad:g}")


@pytest.mark.parametrize("kind,base,name,bad,constraint", list(_declared()))
def test_declared_constraints_reject_bad_values(kind, base, name, bad, constraint):
    with pytest.raises(InputError) as info:
        kind(**{**base, name: bad})
    message = str(info.value)
    assert f"{kind.__name__}.{name}" in message
    assert ("nan" if math.isnan(bad) else f"{bad:g}") in message
    assert constraint.describe() in message


def _write(tmp_path, text):
    path = tmp_path / "rule.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_unknown_key_names_the_file_and_key(tmp_path):
    path = _write(tmp_path, 'name = "x"\nflow = 1\n[[steps]]\no2_l_min = 1\n')
    with pytest.raises(InputError, match=r"rule\.toml.*unknown key 'flow'; allowed:"):
        load_rule(path)
    path = _write(tmp_path, '[[steps]]\no2_l_min = 1\nuntil_et = 0.8\n')
    with pytest.raises(InputError, match=r"steps\[0\] has unknown key 'until_et'"):
        load_rule(path)


@pytest.mark.parametrize(("changes", "pattern"), [
    # impossible values
    ({"steps": [{"o2_l_min": -0.5, "air_l_min": 1.0}]},
     r"RuleStep\.o2_l_min must be a number from 0 to 15 L/min; got -0\.5"),
    ({"steps": [{"o2_l_min": 0.1, "n2o_l_min": 0.9}], "min_fresh_o2_fraction": 0.21},
     r"O2 fraction must be at least air's \(0\.20946\); got 0\.100"),
    ({"min_fresh_o2_fraction": 0.15}, r"min_fresh_o2_fraction must be a number from 0\.20946"),
    ({"steps": [{"o2_l_min": 0.03, "air_l_min": 0.03}]},
     r"total fresh gas flow .* from 0\.1 to 20 L/min; got 0\.06"),
    # contradictory steps
    ({"steps": [{"o2_l_min": 2.0, "air_l_min": 2.0}, {"o2_l_min": 0.3, "air_l_min": 0.2}]},
     r"steps\[0\] has no end .* steps\[1\] would never start"),
    ({"steps": [{"o2_l_min": 0.3, "air_l_min": 0.2, "for_min": 10}]},
     r"steps\[0\] is the last step, .* it cannot end"),
    ({"steps": [{"o2_l_min": 2.0, "air_l_min": 2.0, "until_end_tidal_fraction": 0.9},
                {"o2_l_min": 1.0, "air_l_min": 1.0, "until_end_tidal_fraction": 0.8},
                {"o2_l_min": 0.3, "air_l_min": 0.2}]},
     r"steps\[1\]\.until_end_tidal_fraction \(0\.8\) must be above that of steps\[0\]"),
    ({"steps": [{"o2_l_min": 2.0, "air_l_min": 2.0, "for_min": 5,
                 "until_end_tidal_fraction": 0.8}, {"o2_l_min": 0.3, "air_l_min": 0.2}]},
     r"for_min and RuleStep\.until_end_tidal_fraction contradict"),
    ({"steps": [{"o2_l_min": 0.1, "air_l_min": 0.4}]},
     r"below the rule's own min_fresh_o2_fraction"),
    ({"respond": {"raise_to_l_min": 0.4}}, r"raise_to_l_min \(0\.4 L/min\) must be above"),
    ({"respond": {"on": ["fio2_low", "smoke"]}}, r"respond\.on has unknown warning 'smoke'"),
    ({"hold_max_fgf_l_min": 0.2}, r"hold_max_fgf_l_min \(0\.2 L/min\) is below"),
    ({"steps": []}, r"needs one or more \[\[steps\]\]"),
])
def test_bad_rules_are_refused_with_a_clear_message(changes, pattern):
    with pytest.raises(InputError, match=pattern):
        rule_from_dict(_with(**changes), "myrule.toml")


def test_missing_and_malformed_rule_files(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        load_rule(tmp_path / "nothing.toml")
    with pytest.raises(InputError, match="not valid TOML"):
        load_rule(_write(tmp_path, "steps = [[["))
    with pytest.raises(InputError, match="is a folder"):
        load_rule(tmp_path)


def test_department_prices(tmp_path):
    prices = load_prices(ROOT / "scenarios" / "department" / "prices_invented.toml")
    assert prices.for_agent("sevoflurane").agent_price_per_bottle == 120.0
    assert prices.for_agent("halothane").agent_price_per_bottle is None  # no price given
    with pytest.raises(InputError, match="unknown key 'ether'"):
        prices_from_dict({"ether": {"bottle_ml": 100}}, "p.toml")
    with pytest.raises(InputError, match=r"\[sevoflurane\].*bottle_ml must be given together"):
        prices_from_dict({"sevoflurane": {"agent_price_per_bottle": 100.0}}, "p.toml")
    with pytest.raises(InputError, match=r"n2o_price_per_1000_l must be .* got -1"):
        prices_from_dict({"n2o_price_per_1000_l": -1.0}, "p.toml")

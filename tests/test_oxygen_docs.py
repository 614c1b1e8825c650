"""The worked example in docs/oxygen.md is what the code computes (so the document cannot
drift from the package). The numbers are recomputed here and looked up in the text."""

from pathlib import Path

import pytest

import circlesim as cs
from circlesim.oxygen.minimum import lowest_safe_o2_fraction
from circlesim.oxygen.nitrogen import body_nitrogen_store
from circlesim.oxygen.setup import Setup, minimum_fgf_l_min, steady_state

DOC = Path(__file__).resolve().parents[1] / "docs" / "oxygen.md"


@pytest.fixture(scope="module")
def text():
    return DOC.read_text(encoding="utf-8")


def test_worked_example_numbers(adult, text):
    setup = Setup(adult)
    exhaled, circuit_gas = setup, setup.with_circuit(vent_exhaled_share=0.0)
    for fraction in (0.5, 0.6, 0.8):
        a = float(steady_state(circuit_gas, 0.5, fraction).inspired_o2)
        b = float(steady_state(exhaled, 0.5, fraction).inspired_o2)
        assert f"| {100 * fraction:.0f} % | {a:.3f} | {b:.3f} | {b - a:.3f} |" in text
    assert f"{minimum_fgf_l_min(setup):.3f} L/min" in text
    lowest = lowest_safe_o2_fraction(setup, [0.5])[0]
    assert f"{100 * lowest:.1f} %" in text
    assert f"VO2 {adult.vo2:.1f} mL/min" in text
    store = body_nitrogen_store(setup)
    assert f"**{store.dissolved_l:.2f} L dissolved**" in text
    brody = Setup(adult.with_changes(vo2_ml_min=10.0 * 70.0 ** 0.75))
    assert f"{100 * lowest_safe_o2_fraction(brody, [0.5])[0]:.1f} %: at minimal flow" in text


def test_docs_name_every_oxygen_rule(text):
    for rule in cs.default_rules():
        if rule.key in ("fio2_low", "fresh_o2_low", "fgf_below_uptake", "bag_empty",
                        "inspired_co2"):
            assert f"`{rule.key}`" in text

"""Closed circuit with O2 alone: supplying exactly the patient's O2 uptake keeps the bag steady
apart from nitrogen exchange; supplying 20 % less empties it at the mass-balance rate.

Source of VO2: Brody's rule as used in closed-circuit anaesthesia, VO2 = 10 × kg^0.75 mL/min
(Lowe & Ernst, The Quantitative Practice of Anesthesia, 1981; read in a secondary source) —
242 mL/min for 70 kg. Source of the expected bag
volumes: mass balance of the circuit (gas in − gas out = change held).
"""

import numpy as np
import pytest

import circlesim as cs
from circlesim.oxygen.setup import Setup

BRODY_VO2_70KG = 10.0 * 70.0 ** 0.75  # mL/min STPD (Brody / Lowe & Ernst 1981)


@pytest.fixture
def brody_setup(adult):
    patient = adult.with_changes(vo2_ml_min=BRODY_VO2_70KG)
    return Setup(patient, cs.Circuit(valve="closed", initial_bag_fill=0.5, leak_ml_min=0.0,
                                     sample_returned=True))


def _o2_flowmeter_l_min(setup: Setup, share: float) -> float:
    """O2 flowmeter setting (L/min at 20 °C) delivering ``share`` of VO2 (STPD)."""
    return share * BRODY_VO2_70KG / 1000.0 / setup.k_circuit


def test_exact_uptake_keeps_the_bag_steady_apart_from_nitrogen(brody_setup):
    assert BRODY_VO2_70KG == pytest.approx(242.0, abs=0.1)  # arithmetic check of the rule
    plan = cs.Plan([cs.Step(0, o2_l_min=_o2_flowmeter_l_min(brody_setup, 1.0), valve="closed")],
                   duration_min=60)
    r = brody_setup.simulate(plan, output_interval_min=0.5)
    n2 = r.gas_index("nitrogen")
    bag_change = r.bag_volume_l - r.bag_volume_l[0]
    # what the body's nitrogen exchange alone would do to the bag, L at circuit conditions
    nitrogen = -r.cumulative["uptake"][:, n2] / r.k_circuit
    # tolerance 2 mL: the lungs' CO2 content shifts a little while the alveolar gas changes
    # from air to circuit gas, so the CO2 absorbed differs transiently from VCO2
    assert np.max(np.abs(bag_change - nitrogen)) < 2e-3  # L
    assert np.all(r.vented_stpd < 1e-9) and np.all(r.entrained_stpd < 1e-9)
    # nitrogen leaves the body (the patient breathed air before), so the bag grows a little,
    # by less than the whole dissolved store (about 1 L for 70 kg, design brief, memory)
    assert 0.05 < bag_change[-1] < 1.0
    # and no O2 is missing: the O2 held in the circuit does not fall by more than the lung's
    # O2 exchange at the start (FRC × change of alveolar O2 fraction, < 1 L)
    assert r.bag_volume_l.min() > 0.5 * r.bag_volume_l[0]


def test_twenty_percent_less_empties_the_bag_at_the_predicted_rate(brody_setup):
    # a patient denitrogenated first (10 h of O2 at high flow), so that nitrogen exchange is
    # negligible and the bag falls only by the O2 deficit
    flush = cs.Plan([cs.Step(0, o2_l_min=10.0, valve="open")], duration_min=600)
    start = brody_setup.simulate(flush, output_interval_min=10.0).final_state
    plan = cs.Plan([cs.Step(0, o2_l_min=_o2_flowmeter_l_min(brody_setup, 0.8), valve="closed")],
                   duration_min=60)
    r = brody_setup.simulate(plan, output_interval_min=0.1, initial_state=start)
    deficit = 0.2 * BRODY_VO2_70KG / 1000.0 / r.k_circuit  # L/min at circuit conditions
    early = r.time_min <= 20.0
    slope = np.polyfit(r.time_min[early], r.bag_volume_l[early], 1)[0]
    assert slope == pytest.approx(-deficit, rel=0.01)
    predicted_empty = r.bag_volume_l[0] / deficit
    empty = [a for a in r.alerts if a.key == "bag_empty"]
    assert empty, "the bag_empty alert must fire"
    assert empty[0].start_min == pytest.approx(predicted_empty, abs=0.5)
    assert any(a.key == "fgf_below_uptake" for a in r.alerts)

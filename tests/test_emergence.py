"""Emergence: washout after the vaporizer is turned off, and decrement times against case length.

Checks against the outside world:

* Ordering of the agents. At equal MAC multiples and case lengths, the time to fall to the
  awakening fraction must follow blood solubility: desflurane ≤ sevoflurane ≤ isoflurane.
  Source: blood/gas partition coefficients 0.45 / 0.65 / 1.46 (textbook table of the Miller
  family of anaesthesia texts; 0.57 / 0.74 / 1.45 in Esper et al., Anesth Analg
  2015;120:45-50 — the same order), and the measured terminal washout half-times of Behne,
  Wilke & Lischke (urological surgery; desflurane 8.16 ± 3.15 min < sevoflurane 9.47 ±
  4.46 min; abstract verified, journal from memory: J Clin Anesth 1999).
* Decrement times grow with case length: the longer the tissues have been filling, the more
  agent flows back (Eger EI II et al., Anesth Analg 1998 — desflurane, sevoflurane and
  isoflurane after 2 h and 4 h; from memory — and Bailey JM, Anesth Analg 1997;85:681-6,
  context-sensitive decrement times of inhaled anaesthetics; from memory).
* Higher washout flow shortens them (less exhaled agent comes back to the patient).
* The default awakening fraction is 0.34 × MAC: Katoh et al., Anesth Analg 1993;77:1012-7
  (sevoflurane 0.34, isoflurane 0.31, slow washout; abstract verified); Goto et al.,
  Anesthesiology 2000;93:1188-93 (0.35; abstract verified).
"""

from __future__ import annotations

import numpy as np
import pytest

import circlesim as cs
from circlesim.advisor.emergence import AWAKENING_MAC_FRACTION, decrement_curves, emergence
from circlesim.base.validation import InputError

PATIENT = cs.Patient(weight_kg=70, height_cm=175, age_years=40, sex="male")
AGENTS = ("desflurane", "sevoflurane", "isoflurane")
LENGTHS = (15.0, 60.0, 240.0)


@pytest.fixture(scope="module")
def curves():
    out = {}
    for flow in (2.0, 6.0):
        for agent in AGENTS:
            out[agent, flow] = decrement_curves(
                PATIENT, cs.Circuit(), cs.Vaporizer(agent), held_mac=1.0,
                case_lengths_min=LENGTHS, maintenance_fgf_l_min=2.0, washout_fgf_l_min=flow,
                max_minutes=240.0)
    return out


def test_cases_were_held_at_the_same_mac_multiple(curves):
    for c in curves.values():
        report = c.maintenance.control.targets[0]
        assert report.met, report.message
        for case in c.cases:  # each case starts from 1 MAC within the 5 % band
            assert case.start_end_tidal_percent == pytest.approx(c.cases[0].mac_percent,
                                                                 rel=0.05)


@pytest.mark.parametrize("flow", [2.0, 6.0])
@pytest.mark.parametrize("where", ["end_tidal", "brain"])
def test_agents_wake_in_the_order_of_blood_solubility(curves, flow, where):
    times = {a: (curves[a, flow].awakening_end_tidal_min if where == "end_tidal"
                 else curves[a, flow].awakening_brain_min) for a in AGENTS}
    for i in range(len(LENGTHS)):
        des, sevo, iso = (times[a][i] for a in AGENTS)
        assert np.isfinite([des, sevo, iso]).all()
        assert des <= sevo <= iso, (LENGTHS[i], des, sevo, iso)


@pytest.mark.parametrize("flow", [2.0, 6.0])
@pytest.mark.parametrize("agent", AGENTS)
def test_decrement_times_grow_with_case_length(curves, agent, flow):
    c = curves[agent, flow]
    for table in (c.end_tidal_min, c.brain_min):
        for j, percent in enumerate(c.percents):
            column = table[:, j]
            finite = column[np.isfinite(column)]
            # non-decreasing, to 0.01 min (the output spacing is 0.05 min)
            assert np.all(np.diff(finite) >= -0.01), (percent, column)
        # and the 80 % and 90 % decrements grow clearly from 15 min to 4 h
        for j in (1, 2):
            first, last = table[0, j], table[-1, j]
            assert (not np.isfinite(last)) or last > first + 0.2


@pytest.mark.parametrize("agent", AGENTS)
def test_higher_washout_flow_shortens_them(curves, agent):
    low, high = curves[agent, 2.0], curves[agent, 6.0]
    pairs = ((low.end_tidal_min, high.end_tidal_min), (low.brain_min, high.brain_min),
             (low.awakening_end_tidal_min, high.awakening_end_tidal_min),
             (low.awakening_brain_min, high.awakening_brain_min))
    for slow, fast in pairs:
        # NaN: not reached within the 4 h followed, i.e. longer still
        assert np.all(np.isfinite(fast) | ~np.isfinite(slow))
        both = np.isfinite(slow) & np.isfinite(fast)
        assert np.all(slow[both] > fast[both])


def test_awakening_lies_between_the_decrements_it_spans(curves):
    # from 1 MAC, falling to 0.34 MAC is a 66 % decrement: between the 50 % and 80 % times
    for c in curves.values():
        for i, case in enumerate(c.cases):
            start = case.start_end_tidal_percent / case.mac_percent
            needed = 100 * (1 - c.awakening_fraction / start)
            assert 50 < needed < 80
            assert c.end_tidal_min[i, 0] <= c.awakening_end_tidal_min[i] <= c.end_tidal_min[i, 1]


def test_default_awakening_fraction_and_its_source():
    assert float(AWAKENING_MAC_FRACTION) == 0.34
    assert "Katoh" in AWAKENING_MAC_FRACTION.source and "Goto" in AWAKENING_MAC_FRACTION.source


def test_emergence_after_a_plan_with_air():
    plan = cs.Plan([cs.Step(0, o2_l_min=1, air_l_min=1, dial_percent=2.5)], duration_min=45)
    result = cs.simulate(PATIENT, cs.Circuit(), plan)
    with_o2 = emergence(result, fgf_l_min=4.0, carrier="oxygen")
    with_air = emergence(result, fgf_l_min=4.0, carrier="air")
    # the carrier changes the O2 the patient breathes, not how fast the agent leaves (to 2 %)
    assert with_air.end_tidal_min == pytest.approx(with_o2.end_tidal_min, rel=0.02)
    fio2 = with_air.washout.inspired[:, 0]
    assert fio2[-1] == pytest.approx(0.2095, abs=0.02)  # air (US Standard Atmosphere 1976)
    assert with_o2.washout.inspired[-1, 0] > 0.9
    assert with_o2.threshold_percent == pytest.approx(0.34 * result.mac_percent)
    assert "after" in with_o2.summary()


def test_already_below_the_threshold():
    plan = cs.Plan([cs.Step(0, o2_l_min=2, dial_percent=0.3)], duration_min=20)
    result = cs.simulate(PATIENT, cs.Circuit(), plan)
    em = emergence(result)
    assert em.end_tidal_min == 0.0


@pytest.mark.parametrize("kwargs,field", [
    ({"fgf_l_min": 0.0}, "emergence.fgf_l_min"),
    ({"carrier": "nitrous_oxide"}, "emergence.carrier"),
    ({"awakening_fraction": 0.0}, "emergence.awakening_fraction"),
    ({"max_minutes": 0.5}, "emergence.max_minutes"),
])
def test_bad_emergence_input(kwargs, field):
    plan = cs.Plan([cs.Step(0, o2_l_min=2, dial_percent=2)], duration_min=5)
    result = cs.simulate(PATIENT, cs.Circuit(), plan)
    with pytest.raises(InputError, match=field.replace(".", r"\.")):
        emergence(result, **kwargs)


def test_bad_case_lengths():
    with pytest.raises(InputError, match="case_lengths_min must be one or more increasing"):
        decrement_curves(PATIENT, cs.Circuit(), cs.Vaporizer(), case_lengths_min=(60, 30))
    with pytest.raises(InputError, match=r"case_lengths_min\[0\] must be a number from 5 to "
                                         r"720 min; got 1"):
        decrement_curves(PATIENT, cs.Circuit(), cs.Vaporizer(), case_lengths_min=(1,))

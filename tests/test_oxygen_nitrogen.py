"""Nitrogen: the body's store, and build-up in a near-closed circuit after 2 versus 10 minutes
of high-flow denitrogenation.

Sources: the body nitrogen store of a 70 kg adult is "roughly 1 L dissolved" (design brief,
from memory); nitrogen solubility from circlesim.properties.NITROGEN (blood/gas 0.015,
Weathersby & Homer 1980, secondary; fat/blood 4.5 derived from olive oil/gas 0.067);
inspired N2 and N2 excretion after denitrogenation: Bengtson JP, Bengtsson J, Bengtsson A,
Stenqvist O, J Clin Monit 1993;9:330-4 (abstract).
"""

import math

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.units import btps_to_stpd
from circlesim.engine.model import AIR_N2
from circlesim.oxygen.nitrogen import (
    body_nitrogen_store,
    denitrogenation_study,
    tissue_nitrogen_l,
)
from circlesim.oxygen.setup import FreshGas, Setup
from circlesim.properties import NITROGEN

_PARTITION = {"brain": NITROGEN.brain_blood, "muscle": NITROGEN.muscle_blood,
              "fat": NITROGEN.fat_blood}


def _alveolar_n2_on_air(patient):
    """Alveolar dry N2 fraction breathing air in steady state (alveolar gas balance)."""
    k = btps_to_stpd()
    alveolar_in = k * (patient.default_tidal_volume_ml - patient.dead_space) * (
        patient.default_rate_per_min) / 1000.0
    return alveolar_in * AIR_N2 / (alveolar_in - patient.vo2 / 1000.0 + patient.vco2 / 1000.0)


def _store_by_tissue(patient):
    """N2 each tissue holds on air: k · V · λ_blood/gas · λ_tissue/blood · F_A,N2 (L STPD)."""
    fa = _alveolar_n2_on_air(patient)
    return {t.name: btps_to_stpd() * t.volume_l * NITROGEN.blood_gas * _PARTITION[t.partition]
            * fa for t in patient.tissues()}


def test_body_store_from_tissue_volumes_and_partition_coefficients(adult):
    store = body_nitrogen_store(Setup(adult))
    expected = _store_by_tissue(adult)
    assert store.tissue_l == pytest.approx(expected, rel=1e-9)
    # "a 70 kg adult holds roughly 1 L dissolved" (design brief, memory): within 0.7-1.5 L
    assert 0.7 < store.dissolved_l < 1.5
    # the lungs hold FRC × F_A,N2 besides
    assert store.lungs_l == pytest.approx(btps_to_stpd() * adult.frc * _alveolar_n2_on_air(adult),
                                          rel=1e-9)


def _first_order_left(patient, minutes):
    """N2 left in the tissues after ``minutes`` of breathing O2: each tissue empties with its own
    time constant V·λ_t/b / Q after the lungs' washout delay FRC / alveolar ventilation.
    (Intertissue diffusion and blood transit are neglected: an independent estimate.)"""
    delay = patient.frc / patient.alveolar_ventilation
    left = 0.0
    for t in patient.tissues():
        tau = t.volume_l * _PARTITION[t.partition] / t.blood_flow_l_min
        left += _store_by_tissue(patient)[t.name] * math.exp(-max(minutes - delay, 0.0) / tau)
    return left


def test_two_versus_ten_minutes_of_denitrogenation(adult):
    setup = Setup(adult)
    store = body_nitrogen_store(setup).dissolved_l
    short, long = denitrogenation_study(setup, (2.0, 10.0), duration_min=250.0)
    # size: what each high-flow period washed out of the body matches the store emptying
    # compartment by compartment (tolerance 10 % of the amount washed out)
    for run in (short, long):
        washed = store - run.body_n2_at_start_l
        expected = store - _first_order_left(adult, run.high_flow_min)
        assert washed == pytest.approx(expected, rel=0.10)
        assert 0.0 < run.released_l < run.body_n2_at_start_l
    # ordering: less denitrogenation leaves more N2 in the body and more in the circuit
    assert short.body_n2_at_start_l > long.body_n2_at_start_l
    n2 = {}
    for run in (short, long):
        r = run.result
        n2[run.high_flow_min] = [r.at(run.low_flow_start_min + 60.0 * h,
                                      r.inspired[:, r.gas_index("nitrogen")]) for h in (1, 2, 4)]
    assert all(a > b for a, b in zip(n2[2.0], n2[10.0], strict=True))
    # both rise over hours in the near-closed circuit (the body keeps releasing N2)
    assert n2[2.0][0] < n2[2.0][1] < n2[2.0][2]
    assert n2[10.0][0] < n2[10.0][1] < n2[10.0][2]
    # size of the build-up: the N2 gained by the gas spaces (circuit and lungs) during the low
    # flow is what the body released less what left through the valve (conservation, 1e-6 L),
    # and the extra N2 the 2-minute run ends with is positive but smaller than the extra N2
    # it started the low flow with (body plus gas spaces)
    totals, ends = {}, {}
    for run in (short, long):
        r = run.result
        g = r.gas_index("nitrogen")
        body = tissue_nitrogen_l(r)
        gas = r.held_in_circuit[:, g] + r.held_in_patient[:, g] - body
        k = int(np.argmax(r.time_min >= run.low_flow_start_min))
        lost = sum(r.cumulative[name][-1, g] - r.cumulative[name][k, g]
                   for name in ("vented", "leaked", "sampled"))
        assert gas[-1] - gas[k] == pytest.approx(run.released_l - lost, abs=1e-6)
        totals[run.high_flow_min] = gas[k] + run.body_n2_at_start_l
        ends[run.high_flow_min] = gas[-1]
    assert 0.0 < ends[2.0] - ends[10.0] < totals[2.0] - totals[10.0]


def test_nitrogen_excretion_after_six_minutes_of_denitrogenation(adult):
    """Bengtson et al. 1993: 6 min high-flow denitrogenation, then O2 about 4 mL/kg/min with
    N2O; N2 excretion 39 mL/min at 10 min and 18 mL/min at 60 min, inspired N2 peaking at a
    mean 5.9 % at 40 min.

    The model's decline of the excretion between 10 and 60 min (ratio 39/18 = 2.2) is checked
    within 25 %. Its size is a known disagreement, recorded in docs/oxygen.md: the model's
    dissolved store (1.05 L) releases 3-5 times less than measured (the measured rates add up
    to about 1.4 L between 10 and 60 min, more than the whole store). If this check fails
    because the nitrogen model changed, update docs/oxygen.md.
    """
    setup = Setup(adult)
    plan = cs.Plan([cs.Step(0, o2_l_min=10.0),
                    cs.Step(6, o2_l_min=0.28, n2o_l_min=0.3)], duration_min=90)
    r = setup.simulate(plan, output_interval_min=1.0)
    g = r.gas_index("nitrogen")
    excretion = -1000.0 * r.uptake_stpd[:, g]
    at_10, at_60 = r.at(10.0, excretion), r.at(60.0, excretion)
    assert at_10 / at_60 == pytest.approx(39.0 / 18.0, rel=0.25)
    assert 0.2 < at_10 / 39.0 < 0.35 and 0.2 < at_60 / 18.0 < 0.35  # the recorded gap
    peak = r.inspired[:, g].max()
    assert 0.01 < peak < 0.059  # below the published mean peak, as the excretion is lower


def test_denitrogenation_bad_input(adult):
    with pytest.raises(cs.InputError, match="high_flow_minutes"):
        denitrogenation_study(Setup(adult), ())
    with pytest.raises(cs.InputError, match="duration_min"):
        denitrogenation_study(Setup(adult), (30.0,), duration_min=20.0)
    with pytest.raises(cs.InputError, match="valve"):
        denitrogenation_study(Setup(adult), (2.0,), valve="half")
    # a near-closed circuit with O2/N2O: nitrogen comes only from the body and the lungs
    runs = denitrogenation_study(Setup(adult), (5.0,), low_flow=FreshGas(0.5, 0.5, "n2o"),
                                 duration_min=60.0)
    assert 0.0 < runs[0].peak_inspired_n2 < 0.1

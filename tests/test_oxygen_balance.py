"""The circuit's O2 mass balance in closed form against the engine's simulated steady state.

Source of the closed forms: mass balance of O2 over the circle system (design brief §4:
``FIO2 = (FGF·FO2,fresh − VO2) / (FGF − VO2 − other uptake)``, derived in docs/oxygen.md). The
brief's two forms are written out here from the patient's numbers and the unit conversions,
independently of circlesim.oxygen.balance, and compared with the engine run to steady state.
Tolerance: 0.5 % absolute in FIO2 (the issue's acceptance check).
"""

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.units import atpd_to_stpd, btps_to_stpd
from circlesim.engine.assembly import assemble
from circlesim.engine.layout import parameter_slices
from circlesim.oxygen.minimum import lowest_safe_o2_fraction
from circlesim.oxygen.setup import (
    FreshGas,
    Setup,
    circuit_flows,
    engine_steady_state,
    fresh_gas_stpd,
    steady_state,
)

TOLERANCE = 0.005  # FIO2, absolute (issue 5)
FLOWS = (0.3, 0.5, 1.0, 2.0, 4.0)
FRACTIONS = (0.3, 0.5, 0.8, 1.0)


def _brief_numbers(patient: cs.Patient):
    """Flows in L STPD/min straight from the patient and the unit conversions."""
    k_circuit = atpd_to_stpd(20.0, 101.325)  # flowmeters at 20 °C (Circuit default)
    k_body = btps_to_stpd(101.325)
    minute_volume = patient.default_tidal_volume_ml * patient.default_rate_per_min / 1000.0
    return k_circuit, k_body * minute_volume, patient.vo2 / 1000.0


def _brief_fio2_circuit_venting(fgf_l_min, x, patient):
    """Valve vents well-mixed circuit gas: FIO2 = (F·x − VO2) / (F − VO2) (no other uptake in
    the true steady state)."""
    k, _, vo2 = _brief_numbers(patient)
    f = k * fgf_l_min
    return (f * x - vo2) / (f - vo2)


def _brief_fio2_exhaled_venting(fgf_l_min, x, patient):
    """Valve vents exhaled gas first: FIO2 = (F·x − (1 − v)·VO2) / (v·I) with
    v = (F − VO2) / (I − VO2) the vented share of exhaled gas."""
    k, inspired, vo2 = _brief_numbers(patient)
    f = k * fgf_l_min
    v = (f - vo2) / (inspired - vo2)
    return (f * x - (1.0 - v) * vo2) / (v * inspired)


@pytest.mark.parametrize("share, brief", [(0.0, _brief_fio2_circuit_venting),
                                          (1.0, _brief_fio2_exhaled_venting)])
def test_brief_closed_form_matches_engine_steady_state(adult, share, brief):
    """Across flows and O2 fractions, both venting assumptions, within 0.5 % absolute."""
    setup = Setup(adult, cs.Circuit(vent_exhaled_share=share))
    compared = 0
    for fgf in FLOWS:
        for x in FRACTIONS:
            expected = brief(fgf, x, adult)
            if not steady_state(setup, fgf, x).sustainable:
                continue  # O2 supply below consumption: no steady state at full VO2
            engine = engine_steady_state(setup, FreshGas(fgf, x)).inspired[-1, 0]
            assert abs(engine - expected) < TOLERANCE, (fgf, x, engine, expected)
            closed = float(steady_state(setup, fgf, x).inspired_o2)
            assert abs(closed - expected) < 1e-9, (fgf, x)
            compared += 1
    assert compared >= 16


@pytest.mark.parametrize("share", [0.0, 0.5, 1.0])
@pytest.mark.parametrize("leak, sample_lost, carrier", [(0.0, 0.0, "n2o"), (150.0, 0.0, "air"),
                                                        (0.0, 200.0, "air"),
                                                        (100.0, 200.0, "n2o")])
def test_general_closed_form_with_leak_and_lost_sample(adult, share, leak, sample_lost, carrier):
    """The general closed form (leak, lost sample gas, any venting share, bag filled or
    emptying) against the engine, within 0.5 % absolute."""
    circuit = cs.Circuit(vent_exhaled_share=share, leak_ml_min=leak,
                         sample_ml_min=sample_lost or 200.0, sample_returned=sample_lost == 0.0)
    setup = Setup(adult, circuit)
    for fgf in (0.5, 1.0, 3.0, 8.0):
        for x in (0.5, 0.9):
            state = steady_state(setup, fgf, x, carrier=carrier)
            if not state.sustainable:
                continue
            engine = engine_steady_state(setup, FreshGas(fgf, x, carrier))
            assert abs(engine.inspired[-1, 0] - float(state.inspired_o2)) < TOLERANCE
            assert abs(engine.end_tidal[-1, 0] - float(state.end_tidal_o2)) < TOLERANCE
            assert abs(engine.vented_stpd[-1] - float(state.vented_l_min)) < 0.005 * max(
                1.0, float(state.vented_l_min))
            assert abs(engine.entrained_stpd[-1] - float(state.entrained_l_min)) < 1e-3


def test_high_flow_with_exhaled_first_venting_gives_the_fresh_gas(adult):
    """Above the inspired minute flow the valve vents all exhaled gas: FIO2 = FO2,fresh
    (mass balance: nothing exhaled returns)."""
    setup = Setup(adult, cs.Circuit(vent_exhaled_share=1.0))
    k, inspired, _ = _brief_numbers(adult)
    fgf = 1.2 * inspired / k
    state = steady_state(setup, fgf, 0.4)
    assert float(state.vented_exhaled_share) == 1.0
    assert abs(engine_steady_state(setup, FreshGas(fgf, 0.4)).inspired[-1, 0] - 0.4) < 1e-4


def test_venting_assumptions_differ_at_minimal_flow(adult):
    """At 0.5 L/min the two venting assumptions differ by several FIO2 points (docs/oxygen.md
    quotes the gap); exhaled-first venting keeps more O2, since it vents O2-poor gas."""
    circuit_gas = Setup(adult, cs.Circuit(vent_exhaled_share=0.0))
    exhaled = Setup(adult, cs.Circuit(vent_exhaled_share=1.0))
    gap = (float(steady_state(exhaled, 0.5, 0.5).inspired_o2)
           - float(steady_state(circuit_gas, 0.5, 0.5).inspired_o2))
    assert 0.02 < gap < 0.08
    assert abs(gap - (_brief_fio2_exhaled_venting(0.5, 0.5, adult)
                      - _brief_fio2_circuit_venting(0.5, 0.5, adult))) < 1e-9


def test_fresh_gas_per_gas_matches_the_engine_inputs(adult):
    """The closed forms use the same fresh gas (L STPD/min) as the assembled model."""
    setup = Setup(adult)
    fresh = FreshGas(0.8, 0.55, "air", dial_percent=2.0)
    plan = cs.Plan([cs.Step(0, **fresh.settings())], duration_min=10)
    inputs = assemble(adult, setup.circuit, setup.absorber, setup.vaporizer, plan)
    engine = inputs.params[0][parameter_slices(inputs.lay)["fresh"]]
    ours = fresh_gas_stpd(setup.k_circuit, 0.8, 0.55, "air", 2.0)
    assert np.allclose([ours["o2"], 0.0, ours["n2"], ours["n2o"], ours["agent"]], engine,
                       rtol=1e-12, atol=1e-15)
    flows = circuit_flows(setup)
    assert flows.vo2_l_min == pytest.approx(adult.vo2 / 1000.0)


def test_lowest_safe_fraction_closed_form_matches_engine_root(adult):
    """Root-finding on the engine's steady state gives the closed-form lowest fraction
    (tolerance 0.5 % absolute in the fraction)."""
    setup = Setup(adult)
    flows = (0.25, 0.5, 1.0, 2.0, 4.0)
    closed = lowest_safe_o2_fraction(setup, flows, fio2_threshold=0.3)
    engine = lowest_safe_o2_fraction(setup, flows, fio2_threshold=0.3, method="engine")
    assert np.all(np.abs(closed - engine) < TOLERANCE)
    # less flow needs more O2 (mass balance), and every fraction lies above the threshold
    assert np.all(np.diff(closed) < 0.0)
    assert np.all(closed > 0.3)
    for fgf, x in zip(flows, closed, strict=True):
        assert float(steady_state(setup, fgf, x).inspired_o2) == pytest.approx(0.3, abs=1e-9)

"""Conservation of every gas over whole plans.

Source: mass balance (law of conservation of mass) — for every gas, delivered + entrained =
vented + leaked + lost in sample gas + absorbed + consumed by metabolism + change in what the
circuit, lungs and tissues hold. Tolerance 1e-6 relative to the gas moved (design brief §4).
"""

import numpy as np
import pytest

import circlesim as cs

PLANS = {
    "open valve, flow reduction": (
        cs.Circuit(),
        cs.Plan([cs.Step(0, o2_l_min=2, air_l_min=4, dial_percent=6),
                 cs.Step(8, o2_l_min=0.3, air_l_min=0.2, dial_percent=3)], duration_min=180),
        cs.Vaporizer("sevoflurane")),
    "closed circuit with injections": (
        cs.Circuit(valve="closed", initial_bag_fill=0.6),
        cs.Plan([cs.Step(0, o2_l_min=6, inject_ml=2.0),
                 cs.Step(5, o2_l_min=0.2, inject_ml=1.0),
                 cs.Step(30, inject_ml=1.0)], duration_min=120),
        cs.Vaporizer("isoflurane")),
    "leak and lost sample gas with N2O": (
        cs.Circuit(leak_ml_min=300, sample_ml_min=200, sample_returned=False),
        cs.Plan([cs.Step(0, o2_l_min=2, n2o_l_min=4, dial_percent=4),
                 cs.Step(10, o2_l_min=0.5, n2o_l_min=0.5, dial_percent=4)], duration_min=120),
        cs.Vaporizer("desflurane")),
    "bag runs dry and air is entrained": (
        cs.Circuit(valve="closed", initial_bag_fill=0.3, leak_ml_min=200),
        cs.Plan([cs.Step(0, o2_l_min=0.15, dial_percent=1.0)], duration_min=60),
        cs.Vaporizer("halothane")),
    "draw-over vaporizer inside the circle": (
        cs.Circuit(),
        cs.Plan([cs.Step(0, o2_l_min=0.5, dial_percent=1.0)], duration_min=60),
        cs.Vaporizer("isoflurane", placement="inside")),
    "spent absorbent": (
        cs.Circuit(),
        cs.Plan([cs.Step(0, o2_l_min=0.5, dial_percent=2.0)], duration_min=240),
        cs.Vaporizer("sevoflurane")),
}


def _scale(result):
    end = {k: v[-1] for k, v in result.cumulative.items()}
    held = result.held_in_circuit[-1] + result.held_in_patient[-1] - result.held_at_start
    return sum(np.abs(v) for v in end.values()) + np.abs(held)


@pytest.mark.parametrize("method", ["dopri5", "LSODA"])
@pytest.mark.parametrize("case", sorted(PLANS))
def test_every_gas_is_conserved(case, method):
    circuit, plan, vaporizer = PLANS[case]
    absorber = cs.Absorber(granule_mass_g=150) if case == "spent absorbent" else None
    result = cs.simulate(cs.Patient(), circuit, plan, vaporizer=vaporizer, absorber=absorber,
                         method=method, output_interval_min=1.0)
    balance = result.gas_balance()
    relative = np.abs(balance["residual"]) / np.maximum(_scale(result), 1e-12)
    assert np.all(relative < 1e-6), dict(zip(result.gases, relative, strict=True))


def test_the_dry_bag_case_really_runs_dry():
    circuit, plan, vaporizer = PLANS["bag runs dry and air is entrained"]
    result = cs.simulate(cs.Patient(), circuit, plan, vaporizer=vaporizer)
    assert result.cumulative["entrained"][-1].sum() > 0.1
    assert any(a.key == "bag_empty" for a in result.alerts)


def test_the_spent_absorbent_case_breaks_through():
    circuit, plan, vaporizer = PLANS["spent absorbent"]
    result = cs.simulate(cs.Patient(), circuit, plan, vaporizer=vaporizer,
                         absorber=cs.Absorber(granule_mass_g=150))
    assert result.absorbent_used_fraction[-1] > 0.85
    assert any(a.key == "inspired_co2" for a in result.alerts)


@pytest.mark.parametrize("case", sorted(PLANS))
def test_outputs_without_derivatives_are_those_of_the_full_model(case):
    """``model.outputs`` (what results are built from) skips the derivatives; its outputs must
    be bit for bit those of ``model.evaluate`` (the integrator's right-hand side), in every
    branch the cases reach (bag full, empty, draw-over vapour, spent absorbent)."""
    from circlesim.engine import layout
    from circlesim.engine import model as m
    from circlesim.engine.assembly import assemble

    circuit, plan, vaporizer = PLANS[case]
    result = cs.simulate(cs.Patient(), circuit, plan, vaporizer=vaporizer,
                         output_interval_min=1.0)
    inputs = assemble(cs.Patient(), circuit, cs.Absorber(), vaporizer, plan)
    lay = inputs.lay
    full, only = np.empty(layout.aux_size(lay)), np.empty(layout.aux_size(lay))
    dy, work = np.empty(layout.state_size(lay)), np.empty(m.work_size(lay))
    for y, k in zip(result.states, inputs.segment_at(result.time_min), strict=True):
        m.evaluate(y, inputs.params[k], lay, layout.dims(lay), dy, full, work)
        m.outputs(y, inputs.params[k], lay, layout.dims(lay), only, work)
        assert np.array_equal(full, only)

"""A leak or side-stream sample gas that is not returned lowers FIO2 and raises the fresh gas
flow that must be supplied, by the amounts the mass balance predicts.

Source: mass balance of the circuit (docs/oxygen.md, "Leaks and lost sample gas"). The
expected extra flow is written out here from the circuit and patient numbers; the engine is
the thing checked. Tolerances are stated with each check.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

import circlesim as cs
from circlesim.oxygen.losses import loss_effects, required_fgf_l_min, with_losses
from circlesim.oxygen.setup import (
    FreshGas,
    Setup,
    circuit_flows,
    engine_steady_state,
    minimum_fgf_l_min,
    steady_state,
)

MAKE_UP = FreshGas(1.0, 0.5, "air")


def _engine_fio2(setup, fgf, fraction=0.5):
    return engine_steady_state(setup, FreshGas(fgf, fraction)).inspired[-1, 0]


def test_minimum_flow_rises_by_the_leak_and_the_non_co2_part_of_the_sample(adult):
    base = Setup(adult)
    leaky = with_losses(base, 200.0, 0.0)
    sampled = with_losses(base, 0.0, 200.0)
    # a leak of 200 mL/min at circuit conditions needs 0.200 L/min more fresh gas, exactly
    assert minimum_fgf_l_min(leaky) - minimum_fgf_l_min(base) == pytest.approx(0.200, abs=1e-12)
    # lost sample gas: the inspiratory part in full, the expiratory part without its CO2
    flows = circuit_flows(base)
    f = base.circuit.inspiratory_fraction
    exhaled = flows.inspired_l_min - flows.vo2_l_min + flows.vco2_l_min
    expected = 0.200 * (f + (1.0 - f) * (1.0 - flows.vco2_l_min / exhaled))
    assert minimum_fgf_l_min(sampled) - minimum_fgf_l_min(base) == pytest.approx(expected,
                                                                                 rel=1e-9)
    # the engine agrees: just above the minimum the bag stays full, just below it empties
    for setup in (leaky, sampled):
        lowest = minimum_fgf_l_min(setup)
        above = engine_steady_state(setup, FreshGas(lowest + 0.01, 1.0))
        below = engine_steady_state(setup, FreshGas(lowest - 0.01, 1.0))
        assert above.entrained_stpd[-1] < 1e-6
        assert below.entrained_stpd[-1] > 0.005


@pytest.mark.parametrize("leak, sample", [(200.0, 0.0), (0.0, 200.0), (200.0, 200.0)])
def test_losses_lower_fio2_by_the_mass_balance_amount(adult, leak, sample):
    """Valve venting exhaled gas first (the default): losses take O2-rich circuit gas."""
    base, lossy = Setup(adult), with_losses(Setup(adult), leak, sample)
    engine_drop = _engine_fio2(base, 1.0) - _engine_fio2(lossy, 1.0)
    closed_drop = (float(steady_state(base, 1.0, 0.5).inspired_o2)
                   - float(steady_state(lossy, 1.0, 0.5).inspired_o2))
    assert engine_drop > 0.001  # FIO2 falls
    assert engine_drop == pytest.approx(closed_drop, abs=0.0005)


def test_losses_raise_the_required_flow_by_the_mass_balance_amount(adult):
    """The flow at 50 % O2 that keeps FIO2 at 0.35: engine root-finding against the closed
    form, within 0.01 L/min."""
    threshold = 0.35
    base, lossy = Setup(adult), with_losses(Setup(adult), 300.0, 200.0)
    closed = [required_fgf_l_min(s, MAKE_UP, threshold) for s in (base, lossy)]
    engine = [brentq(lambda f, s=s: _engine_fio2(s, f) - threshold, 0.5, 3.0, xtol=1e-4)
              for s in (base, lossy)]
    assert engine[0] == pytest.approx(closed[0], abs=0.01)
    assert engine[1] == pytest.approx(closed[1], abs=0.01)
    assert engine[1] - engine[0] == pytest.approx(closed[1] - closed[0], abs=0.01)
    assert engine[1] > engine[0]


def test_leak_does_not_change_fio2_when_the_valve_vents_circuit_gas(adult):
    """With the valve venting well-mixed circuit gas the leak only replaces venting
    (mass balance), as long as the valve still vents."""
    base = Setup(adult, cs.Circuit(vent_exhaled_share=0.0))
    leaky = with_losses(base, 200.0, 0.0)
    assert _engine_fio2(leaky, 1.0) == pytest.approx(_engine_fio2(base, 1.0), abs=1e-4)


def test_loss_table(adult):
    table = loss_effects(Setup(adult), MAKE_UP, leaks_ml_min=(0, 100, 300),
                         samples_lost_ml_min=(0, 200), engine_check=True)
    assert len(table) == 6
    assert np.allclose(table["engine_fio2"], table["steady_fio2"], atol=0.005)
    no_sample = table[table.sample_lost_ml_min == 0]
    assert np.all(np.diff(no_sample["steady_fio2"]) < 0)  # more leak, less O2
    assert np.allclose(no_sample["extra_minimum_fgf_l_min"], no_sample["leak_ml_min"] / 1000.0)
    assert np.all(np.diff(no_sample["required_fgf_l_min"]) > 0)

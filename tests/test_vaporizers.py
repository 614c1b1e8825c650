"""Vaporizer placement: a plenum outside the circle never exceeds its dial; a draw-over
vaporizer inside a closed circle makes the concentration climb breath after breath.

Source: standard teaching on vaporizer placement (common practice): vaporizer outside the
circuit (VOC) — inspired concentration cannot exceed the dial; vaporizer inside the circuit
(VIC) — each pass through the vaporizer adds agent, so at low fresh gas flow the inspired
concentration can rise well above the setting.
"""

import numpy as np
import pytest

import circlesim as cs


@pytest.mark.parametrize("fgf", [0.3, 1.0, 6.0])
@pytest.mark.parametrize("agent", ["sevoflurane", "isoflurane", "desflurane"])
def test_plenum_vaporizer_never_exceeds_dial(agent, fgf):
    dial = 0.5 * cs.agent(agent).max_dial_percent
    plan = cs.Plan([cs.Step(0, o2_l_min=fgf, dial_percent=dial)], duration_min=60)
    result = cs.simulate(cs.Patient(), cs.Circuit(), plan, vaporizer=cs.Vaporizer(agent),
                         output_interval_min=0.5)
    assert np.max(result.inspired_percent("agent")) <= dial * (1 + 1e-9)
    assert np.max(result.end_tidal_percent("agent")) < dial


def test_draw_over_inside_closed_circle_climbs_above_setting():
    setting = 1.0
    plan = cs.Plan([cs.Step(0, o2_l_min=0.25, dial_percent=setting)], duration_min=30)
    result = cs.simulate(cs.Patient(), cs.Circuit(), plan,
                         vaporizer=cs.Vaporizer("isoflurane", placement="inside"),
                         output_interval_min=0.5)
    fi = result.inspired_percent("agent")
    # climbs: at 10 min the inspired concentration is more than twice the setting ...
    assert result.at(10.0, fi) > 2.0 * setting
    # ... and keeps rising through the plan (breath after breath)
    assert np.all(np.diff(fi[result.time_min >= 1.0]) > 0)
    # the same setting in a plenum vaporizer outside the circle stays at or below the dial
    outside = cs.simulate(cs.Patient(), cs.Circuit(), plan,
                          vaporizer=cs.Vaporizer("isoflurane", placement="outside"),
                          output_interval_min=0.5)
    assert np.max(outside.inspired_percent("agent")) <= setting * (1 + 1e-9)


def test_draw_over_cannot_pass_saturation():
    # Physical limit: gas leaving the vaporizer chamber cannot hold more than the saturated
    # vapour fraction (SVP / ambient pressure).
    plan = cs.Plan([cs.Step(0, o2_l_min=0.2, dial_percent=20.0)], duration_min=120)
    vaporizer = cs.Vaporizer("halothane", placement="inside", max_dial_percent=25.0)
    result = cs.simulate(cs.Patient(), cs.Circuit(), plan, vaporizer=vaporizer,
                         output_interval_min=1.0)
    saturation = 100 * cs.agent("halothane").vapour_pressure_kpa(20.0) / 101.325
    assert np.max(result.inspired_percent("agent")) < saturation


def test_plenum_output_adds_to_fresh_gas_volume():
    # A plenum vaporizer at dial d adds vapour so that its output holds the fraction d:
    # vapour = carrier × d / (1 − d) (design brief §3).
    plan = cs.Plan([cs.Step(0, o2_l_min=2.0, dial_percent=6.0)], duration_min=5)
    result = cs.simulate(cs.Patient(), cs.Circuit(), plan, vaporizer=cs.Vaporizer("desflurane"))
    assert result.fresh_gas_l_min[0] == pytest.approx(2.0 / (1 - 0.06), rel=1e-12)

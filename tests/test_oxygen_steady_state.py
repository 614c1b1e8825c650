"""Low-flow oxygen steady state against the closed-form mass balance.

Source: the mass balance of DESIGN.md §4, derived in docs/model.md: with the vented gas at
circuit composition, in steady state FIO2 = (FGF·FO2,fresh − VO2) / (FGF − VO2 − other uptake),
all flows in one unit (L STPD/min). Tolerance 0.005 absolute FIO2.
"""

import pytest

import circlesim as cs
from circlesim.base.units import atpd_to_stpd


@pytest.mark.parametrize("fgf,o2_share", [(0.5, 0.6), (0.5, 0.8), (1.0, 0.5), (2.0, 0.4)])
def test_fio2_matches_closed_form_when_vent_is_circuit_gas(fgf, o2_share):
    # O2 + air fresh gas, no agent, circuit venting well-mixed gas (vent_exhaled_share = 0).
    air = fgf * (1.0 - o2_share) / (1.0 - 0.20946)
    o2 = fgf - air
    plan = cs.Plan([cs.Step(0, o2_l_min=o2, air_l_min=air)], duration_min=360)
    circuit = cs.Circuit(vent_exhaled_share=0.0)
    patient = cs.Patient()
    r = cs.simulate(patient, circuit, plan, output_interval_min=1.0)
    k = atpd_to_stpd(circuit.gas_temperature_c, circuit.ambient_pressure_kpa)
    fgf_stpd = k * fgf
    o2_in = k * (o2 + 0.20946 * air)
    vo2 = patient.vo2 / 1000.0
    other = r.uptake_stpd[-1, 2:].sum()  # N2 and agent still moving into or out of the body
    closed_form = (o2_in - vo2) / (fgf_stpd - vo2 - other)
    assert r.inspired[-1, 0] == pytest.approx(closed_form, abs=0.005)


def test_fio2_is_lower_at_minimal_flow_than_at_high_flow():
    # Source: Hendrickx et al., J Clin Anesth 2001;13:461-4 (abstract): with air/O2 mixtures
    # FIO2 falls below the delivered O2 fraction whenever FGF ≤ 2 L/min.
    def fio2(fgf):
        air = fgf * 0.5 / (1 - 0.20946)
        plan = cs.Plan([cs.Step(0, o2_l_min=fgf - air, air_l_min=air)], duration_min=120)
        return cs.simulate(cs.Patient(), cs.Circuit(), plan, output_interval_min=1.0).inspired[
            -1, 0]
    assert fio2(0.5) < fio2(1.0) < fio2(2.0) < 0.5 + 1e-3
    assert fio2(8.0) == pytest.approx(0.5, abs=0.01)

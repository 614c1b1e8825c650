"""Absorbent at minimal flow: CO2 reaching the canister, canister life and the time inspired CO2
rises.

Sources: mass balance of CO2 over the circle (docs/oxygen.md, "Absorbent"): with the valve
venting exhaled gas first, the vented share of exhaled CO2 never reaches the absorbent, so
absorbent use rises as flow falls (design brief §3); canister capacity 12.1 L CO2 per 100 g
(Higuchi et al., Anesth Analg 2001;93:221-5, the Absorber default).
"""

import numpy as np
import pytest

import circlesim as cs
from circlesim.oxygen.absorbent import absorbent_by_flow, inspired_co2_rise_time
from circlesim.oxygen.setup import FreshGas, Setup, steady_state


@pytest.mark.parametrize("share", [0.0, 1.0])
def test_co2_reaching_the_absorbent_matches_the_engine(adult, share):
    """Closed form c·VCO2 against the engine after 3 h at a constant make-up, within 1 %."""
    setup = Setup(adult, cs.Circuit(vent_exhaled_share=share))
    for fgf in (0.5, 1.0, 2.0, 4.0):
        plan = cs.Plan([cs.Step(0, **FreshGas(fgf, 0.5).settings())], duration_min=180)
        engine = setup.simulate(plan, output_interval_min=5.0).absorbed_stpd[-1]
        closed = float(steady_state(setup, fgf, 0.5).co2_to_absorber_l_min)
        assert engine == pytest.approx(closed, rel=0.01, abs=1e-5)


def test_absorbent_use_rises_as_flow_falls(adult):
    exhaled_first = absorbent_by_flow(Setup(adult), (0.5, 1.0, 2.0, 4.0), with_engine=False)
    assert np.all(np.diff(exhaled_first["co2_to_absorber_ml_min"]) < 0)
    assert np.all(np.diff(exhaled_first["life_to_breakthrough_h"]) > 0)
    vco2 = Setup(adult).patient.vco2
    assert exhaled_first["co2_to_absorber_ml_min"][0] <= vco2
    # the valve venting mixed circuit gas sends all the CO2 to the absorbent at any flow
    circuit_gas = absorbent_by_flow(Setup(adult, cs.Circuit(vent_exhaled_share=0.0)),
                                    (0.5, 4.0), with_engine=False)
    assert np.allclose(circuit_gas["co2_to_absorber_ml_min"], vco2, rtol=1e-9)


def test_inspired_co2_rises_between_breakthrough_start_and_full_use(adult):
    """The engine's rise of inspired CO2 (0.5 kPa, the alert default) comes after the canister
    reaches its breakthrough start and before it is used up (mass-balance times)."""
    setup = Setup(adult, absorber=cs.Absorber(granule_mass_g=500.0))
    table = absorbent_by_flow(setup, (0.5, 2.0), max_hours=48.0)
    for _, row in table.iterrows():
        assert row["life_to_breakthrough_h"] < row["inspired_co2_rise_h"] < row["life_to_full_h"]
    assert table["inspired_co2_rise_h"][1] > table["inspired_co2_rise_h"][0]
    # a half-used canister lasts about half as long
    half = Setup(adult, absorber=cs.Absorber(granule_mass_g=500.0, used_fraction=0.4))
    rise = inspired_co2_rise_time(half, FreshGas(0.5, 0.5), max_hours=48.0)
    assert rise / 60.0 < table["inspired_co2_rise_h"][0]
    assert inspired_co2_rise_time(Setup(adult), FreshGas(8.0, 0.5), max_hours=6.0) is None


def test_absorbent_bad_input(adult):
    with pytest.raises(cs.InputError, match="threshold_kpa"):
        inspired_co2_rise_time(Setup(adult), FreshGas(1.0, 0.5), threshold_kpa=0.0)
    with pytest.raises(cs.InputError, match="fgf_l_min"):
        absorbent_by_flow(Setup(adult), [])

"""Units and gas-volume conditions: the one home for every conversion.

Inside circlesim every amount of gas is a volume of dry gas at STPD (0 °C, 101.325 kPa),
that is, a number of moles written in litres (1 mol = 22.414 L STPD). Flows are L STPD/min,
times are minutes, and gas composition is a *dry-gas fraction* (water vapour excluded), which
is how a side-stream analyser reports a sample after its water trap. Partial pressures in the
body are ``fraction × (P_ambient − P_H2O,37 °C)``.

People think in other conditions, and this module converts at the boundary:

* flowmeters and the circuit: dry gas at the circuit temperature and ambient pressure (ATPD);
* ventilation (tidal volume, alveolar ventilation, FRC): body temperature, ambient pressure,
  saturated with water vapour (BTPS);
* oxygen consumption and CO2 production: STPD already.
"""

from __future__ import annotations

import numpy as np

#: Standard pressure, kPa.
STANDARD_PRESSURE_KPA = 101.325
#: 0 °C in kelvin.
ZERO_CELSIUS_K = 273.15
#: Body temperature, °C.
BODY_TEMPERATURE_C = 37.0
#: Molar gas constant, J/(mol K) (CODATA 2018, exact).
GAS_CONSTANT = 8.314462618
#: Molar volume of an ideal gas at STPD, L/mol: R T0 / P0 = 22.414 L/mol.
MOLAR_VOLUME_STPD_L = GAS_CONSTANT * ZERO_CELSIUS_K / STANDARD_PRESSURE_KPA
#: Saturated water vapour pressure at 37 °C, kPa. Source: IAPWS-95 (Wagner & Pruss,
#: J Phys Chem Ref Data 2002;31:387), 6.2795 kPa = 47.1 mmHg; checked against the
#: ``chemicals`` package in the tests.
WATER_VAPOUR_37C_KPA = 6.2795
#: kPa per mmHg (1 mmHg = 101.325/760 kPa, exact).
KPA_PER_MMHG = STANDARD_PRESSURE_KPA / 760.0

__all__ = [
    "BODY_TEMPERATURE_C",
    "GAS_CONSTANT",
    "KPA_PER_MMHG",
    "MOLAR_VOLUME_STPD_L",
    "STANDARD_PRESSURE_KPA",
    "WATER_VAPOUR_37C_KPA",
    "ZERO_CELSIUS_K",
    "atpd_to_stpd",
    "body_partial_pressure_kpa",
    "btps_to_stpd",
    "fraction_to_percent",
    "kelvin",
    "kpa_to_mmhg",
    "liquid_ml_to_vapour_l_stpd",
    "ml_to_l",
    "mmhg_to_kpa",
    "molar_volume_l",
    "percent_to_fraction",
    "vapour_l_stpd_to_grams",
    "vapour_l_stpd_to_liquid_ml",
]


def kelvin(temperature_c: float) -> float:
    """Temperature in kelvin from °C."""
    return temperature_c + ZERO_CELSIUS_K


def mmhg_to_kpa(pressure_mmhg):
    """Pressure in kPa from mmHg."""
    return np.asarray(pressure_mmhg, dtype=float) * KPA_PER_MMHG


def kpa_to_mmhg(pressure_kpa):
    """Pressure in mmHg from kPa."""
    return np.asarray(pressure_kpa, dtype=float) / KPA_PER_MMHG


def percent_to_fraction(percent):
    """Fraction (0–1) from vol%."""
    return np.asarray(percent, dtype=float) / 100.0


def fraction_to_percent(fraction):
    """vol% from a fraction (0–1)."""
    return np.asarray(fraction, dtype=float) * 100.0


def ml_to_l(volume_ml):
    """Litres from millilitres."""
    return np.asarray(volume_ml, dtype=float) / 1000.0


def molar_volume_l(temperature_c: float = 0.0,
                   pressure_kpa: float = STANDARD_PRESSURE_KPA) -> float:
    """Molar volume of an ideal gas, L/mol, at ``temperature_c`` (°C) and ``pressure_kpa``.

    ``R T / P``: 22.414 L/mol at STPD, 24.055 L/mol at 20 °C and 101.325 kPa.
    """
    return GAS_CONSTANT * kelvin(temperature_c) / pressure_kpa


def atpd_to_stpd(temperature_c: float, pressure_kpa: float = STANDARD_PRESSURE_KPA) -> float:
    """Factor turning a dry-gas volume at ``temperature_c`` (°C) and ``pressure_kpa`` into STPD.

    Used for flowmeter readings and circuit gas volumes (dry gas at room temperature).
    """
    return (pressure_kpa / STANDARD_PRESSURE_KPA) * ZERO_CELSIUS_K / kelvin(temperature_c)


def btps_to_stpd(pressure_kpa: float = STANDARD_PRESSURE_KPA) -> float:
    """Factor turning a BTPS volume (37 °C, ambient pressure, saturated) into dry gas at STPD.

    It is also the amount (L STPD) held per litre and per unit dry-gas fraction by a gas space
    or an Ostwald-coefficient-1 liquid at 37 °C: ``n = factor × V × λ × F``.
    """
    dry = (pressure_kpa - WATER_VAPOUR_37C_KPA) / STANDARD_PRESSURE_KPA
    return dry * ZERO_CELSIUS_K / kelvin(BODY_TEMPERATURE_C)


def body_partial_pressure_kpa(fraction, pressure_kpa: float = STANDARD_PRESSURE_KPA):
    """Partial pressure (kPa) in the body of a gas at dry-gas ``fraction``."""
    return np.asarray(fraction, dtype=float) * (pressure_kpa - WATER_VAPOUR_37C_KPA)


def liquid_ml_to_vapour_l_stpd(volume_ml, density_g_ml: float, molar_mass_g_mol: float):
    """Vapour (L STPD) made by evaporating ``volume_ml`` of liquid agent.

    ``mL × density / molar mass × molar volume``.
    """
    moles = np.asarray(volume_ml, dtype=float) * density_g_ml / molar_mass_g_mol
    return moles * MOLAR_VOLUME_STPD_L


def vapour_l_stpd_to_liquid_ml(vapour_l, density_g_ml: float, molar_mass_g_mol: float):
    """Liquid agent (mL) that makes ``vapour_l`` litres STPD of vapour."""
    moles = np.asarray(vapour_l, dtype=float) / MOLAR_VOLUME_STPD_L
    return moles * molar_mass_g_mol / density_g_ml


def vapour_l_stpd_to_grams(vapour_l, molar_mass_g_mol: float):
    """Mass (g) of ``vapour_l`` litres STPD of a gas or vapour."""
    return np.asarray(vapour_l, dtype=float) / MOLAR_VOLUME_STPD_L * molar_mass_g_mol

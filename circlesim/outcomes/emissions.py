"""Greenhouse emissions of anaesthetic gases: GWP look-up and CO2-equivalents.

A gas's CO2-equivalent is its mass times its global-warming potential (GWP) over a chosen time
horizon. The GWP values live in :mod:`circlesim.properties`, each with its source: GWP20 of
the agents from Ryan & Nielsen, Anesth Analg 2010;111:92–8; GWP100 of the agents from Sulbaek
Andersen et al., Anesth Analg 2012;114:1081–5 (recorded from memory: check before relying on
them); N2O from IPCC AR6 WG1 Table 7.15 (273 on both horizons). Halothane and enflurane have
no value in circlesim, and their CO2-equivalent is reported as not available rather than
guessed.

Everything delivered is counted as emitted: scavenging systems vent to the open air, and what
the patient takes up is breathed out after the case (metabolism of a few per cent is
neglected), as in Ryan & Nielsen's method.
"""

from __future__ import annotations

from dataclasses import dataclass

from circlesim.base.units import MOLAR_VOLUME_STPD_L
from circlesim.base.validation import InputError, Interval, check_number
from circlesim.properties import AGENTS, NITROUS_OXIDE, SolubleGas

__all__ = [
    "DEFAULT_GWP_HORIZON",
    "GWP_HORIZONS",
    "RYAN_NIELSEN_MOLAR_VOLUME_L",
    "Gwp",
    "check_horizon",
    "co2_equivalent_kg",
    "gwp",
    "open_circuit_agent_grams",
]

#: Time horizons (years) for which circlesim has GWP values.
GWP_HORIZONS = (20, 100)
#: Default horizon, years. GWP20 is the horizon whose agent values were checked against their
#: published source (Ryan & Nielsen 2010); choose 100 for the usual carbon-accounting horizon.
DEFAULT_GWP_HORIZON = 20
#: Molar volume Ryan & Nielsen's published grams imply, L/mol (derived by back-calculation from
#: their published grams and CDE20: it reproduces all three CDE20 values within 0.3 %).
RYAN_NIELSEN_MOLAR_VOLUME_L = 24.0


@dataclass(frozen=True)
class Gwp:
    """A global-warming potential and where it comes from.

    Attributes
    ----------
    gas : str
    horizon_years : int
    value : float or None
        kg CO2-equivalent per kg of gas; None when circlesim has no published value.
    source : str
        Citation, or why there is no value.
    """

    gas: str
    horizon_years: int
    value: float | None
    source: str

    @property
    def available(self) -> bool:
        """Whether a value exists."""
        return self.value is not None

    def __str__(self) -> str:
        if self.value is None:
            return f"GWP{self.horizon_years} of {self.gas}: not available ({self.source})"
        return f"GWP{self.horizon_years} of {self.gas}: {self.value:g} ({self.source})"


def check_horizon(horizon_years) -> int:
    """Return the horizon as an int, or raise :class:`InputError` if it is not 20 or 100."""
    try:
        value = float(horizon_years)
    except (TypeError, ValueError):
        value = float("nan")
    if value not in GWP_HORIZONS:
        raise InputError(f"gwp_horizon must be one of {', '.join(map(str, GWP_HORIZONS))} "
                         f"years; got {horizon_years!r}.")
    return int(value)


def _gas(name: str) -> SolubleGas:
    key = str(name).strip().lower()
    if key in ("nitrous_oxide", "n2o"):
        return NITROUS_OXIDE
    if key in AGENTS:
        return AGENTS[key]
    raise InputError(f"gas must be 'nitrous_oxide' or one of {', '.join(map(repr, AGENTS))}; "
                     f"got {name!r}.")


def gwp(gas: str, horizon_years: int = DEFAULT_GWP_HORIZON) -> Gwp:
    """GWP of ``gas`` over ``horizon_years`` (20 or 100), with its source.

    Raises
    ------
    InputError
        For an unknown gas or horizon.
    """
    horizon = check_horizon(horizon_years)
    g = _gas(gas)
    value = g.gwp20 if horizon == 20 else g.gwp100
    if value is None:
        return Gwp(g.name, horizon, None, "no published value in circlesim's property tables")
    return Gwp(g.name, horizon, float(value), value.source)


def co2_equivalent_kg(grams: float, gwp_value: Gwp) -> float | None:
    """CO2-equivalent (kg) of ``grams`` of a gas: ``grams × GWP / 1000``; None if no GWP.

    Parameters
    ----------
    grams : float, g, ≥ 0
    gwp_value : Gwp
    """
    check_number("co2_equivalent_kg", "grams", grams, Interval(0.0, float("inf"), "g"))
    if gwp_value.value is None:
        return None
    return grams * gwp_value.value / 1000.0


def open_circuit_agent_grams(concentration_percent: float, fgf_l_min: float,
                             duration_min: float, molar_mass_g_mol: float,
                             molar_volume_l_mol: float = MOLAR_VOLUME_STPD_L) -> float:
    """Agent (g) in a fresh gas stream that is all vented (no rebreathing, no uptake credit).

    ``grams = FGF × t × C/100 / V_m × M`` — Ryan & Nielsen's way of counting 1 MAC-hour
    (Anesth Analg 2010;111:92–8) with their molar volume of 24.0 L/mol
    (:data:`RYAN_NIELSEN_MOLAR_VOLUME_L`).

    Parameters
    ----------
    concentration_percent : float, vol%, 0–100
        Agent in the fresh gas.
    fgf_l_min : float, L/min, ≥ 0
        Fresh gas flow, agent included.
    duration_min : float, min, ≥ 0
    molar_mass_g_mol : float, g/mol, > 0
    molar_volume_l_mol : float, L/mol, 10–40
        Molar volume at the conditions ``fgf_l_min`` is measured at (default STPD).
    """
    owner = "open_circuit_agent_grams"
    check_number(owner, "concentration_percent", concentration_percent,
                 Interval(0.0, 100.0, "vol%"))
    check_number(owner, "fgf_l_min", fgf_l_min, Interval(0.0, float("inf"), "L/min"))
    check_number(owner, "duration_min", duration_min, Interval(0.0, float("inf"), "min"))
    check_number(owner, "molar_mass_g_mol", molar_mass_g_mol,
                 Interval(0.0, float("inf"), "g/mol", low_open=True))
    check_number(owner, "molar_volume_l_mol", molar_volume_l_mol,
                 Interval(10.0, 40.0, "L/mol"))
    vapour_l = fgf_l_min * duration_min * concentration_percent / 100.0
    return vapour_l / molar_volume_l_mol * molar_mass_g_mol

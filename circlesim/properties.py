"""Physical and pharmacological properties of the gases and agents, each with its source.

Every number is a :class:`Sourced` float: it behaves as a plain ``float`` and carries a short
``.source`` string naming where it comes from. Sources are tagged the way ``docs/model.md``
explains: a published paper or label (checked), "textbook" (a standard textbook table), or
"memory" when the value was written down from memory and could not be checked here.

The blood/gas partition coefficients differ by 5–12 % between studies (Esper et al., Anesth
Analg 2015;120:45–50). The default set is the textbook table; ``blood_gas_source="esper2015"``
picks the newer patient measurements where they exist.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType

from circlesim.base.units import STANDARD_PRESSURE_KPA, kelvin, mmhg_to_kpa
from circlesim.base.validation import InputError

__all__ = [
    "AGENTS",
    "BLOOD_GAS_SOURCES",
    "NITROGEN",
    "NITROUS_OXIDE",
    "Agent",
    "SolubleGas",
    "Sourced",
    "agent",
    "agent_names",
]


class Sourced(float):
    """A float that remembers where it came from (``.source``)."""

    source: str

    def __new__(cls, value: float, source: str) -> Sourced:
        obj = super().__new__(cls, value)
        obj.source = source
        return obj

    def __repr__(self) -> str:
        return f"{float(self)!r} [{self.source}]"

    def __str__(self) -> str:
        return float.__repr__(self)


def _s(value: float, source: str) -> Sourced:
    return Sourced(value, source)


TEXTBOOK = ("textbook: 'Comparative characteristics of inhaled anesthetics' table, Inhaled "
            "Anesthetics chapter (Miller/Barash family of anaesthesia texts)")
YASUDA_1989 = ("Yasuda N, Targ AG, Eger EI II. Solubility of I-653, sevoflurane, isoflurane and "
               "halothane in human tissues. Anesth Analg 1989;69:370-3 (brain/blood)")
MAPLESON_1996 = "Mapleson WW. Effect of age on MAC in humans. Br J Anaesth 1996;76:179-85"
ESPER_2015 = ("Esper T et al. Blood/gas partition coefficients for isoflurane, sevoflurane and "
              "desflurane in a clinically relevant patient population. Anesth Analg "
              "2015;120:45-50")
RYAN_NIELSEN_2010 = ("Ryan SM, Nielsen CJ. Global warming potential of inhaled anesthetics. "
                     "Anesth Analg 2010;111:92-8 (GWP20)")
SULBAEK_2012 = ("Sulbaek Andersen MP et al. Assessing the impact on global climate from general "
                "anesthetic gases. Anesth Analg 2012;114:1081-5 (GWP100; memory)")
IPCC_AR6 = "IPCC AR6 WG1 (2021) Table 7.15: N2O GWP100 = GWP20 = 273"
CHEMICALS = "molar mass from formula; matches the chemicals package (tests)"
COMMON_PRACTICE = "common practice (largest setting on current plenum vaporizers)"

#: Which sets of blood/gas coefficients can be chosen.
BLOOD_GAS_SOURCES = ("textbook", "esper2015")


@dataclass(frozen=True, kw_only=True)
class SolubleGas:
    """A gas that dissolves in blood and tissues (N2, N2O and the volatile agents).

    Attributes
    ----------
    name : str
        Lower-case name used throughout circlesim.
    label : str
        Name for display.
    molar_mass_g_mol : float
        g/mol.
    blood_gas : float
        Blood/gas partition coefficient (Ostwald, 37 °C), default set.
    brain_blood, muscle_blood, fat_blood : float
        Tissue/blood partition coefficients, 37 °C. The vessel-rich group takes the brain value.
    mac40_percent : float or None
        MAC at age 40, vol% (None for gases that are not anaesthetics).
    blood_gas_alternatives : mapping of str to float
        Other published blood/gas values by source key.
    gwp20, gwp100 : float or None
        Global-warming potential over 20 and 100 years (CO2 = 1).
    colour : str
        Plot colour (hex). Volatile agents follow the ISO 5360 agent colour code.
    """

    name: str
    label: str
    molar_mass_g_mol: Sourced
    blood_gas: Sourced
    brain_blood: Sourced
    muscle_blood: Sourced
    fat_blood: Sourced
    mac40_percent: Sourced | None = None
    blood_gas_alternatives: MappingProxyType = field(
        default_factory=lambda: MappingProxyType({}))
    gwp20: Sourced | None = None
    gwp100: Sourced | None = None
    colour: str = "#555555"

    def blood_gas_for(self, source: str) -> float:
        """Blood/gas coefficient from the chosen source set (falls back to the textbook)."""
        if source not in BLOOD_GAS_SOURCES:
            raise InputError(
                f"blood_gas_source must be one of {', '.join(map(repr, BLOOD_GAS_SOURCES))}; "
                f"got {source!r}.")
        return self.blood_gas_alternatives.get(source, self.blood_gas)


@dataclass(frozen=True, kw_only=True)
class Agent(SolubleGas):
    """A volatile anaesthetic given from a vaporizer or injected as liquid.

    Extra attributes
    ----------------
    liquid_density_g_ml : float
        Liquid density near 20 °C, g/mL.
    svp_20c_kpa : float
        Saturated vapour pressure at 20 °C, kPa.
    boiling_point_c : float
        Normal boiling point (101.325 kPa), °C.
    max_dial_percent : float
        Largest setting of a plenum vaporizer for this agent, vol%.
    """

    liquid_density_g_ml: Sourced
    svp_20c_kpa: Sourced
    boiling_point_c: Sourced
    max_dial_percent: Sourced

    def vapour_pressure_kpa(self, temperature_c: float) -> float:
        """Saturated vapour pressure (kPa) at ``temperature_c`` (°C).

        Clausius–Clapeyron line through the vapour pressure at 20 °C and the normal boiling
        point; within about 2 % of tabulated data from 10 to 40 °C (checked against the
        ``chemicals`` package and the product labels in the tests).
        """
        t20 = kelvin(20.0)
        tb = kelvin(float(self.boiling_point_c))
        slope = math.log(STANDARD_PRESSURE_KPA / self.svp_20c_kpa) / (1.0 / t20 - 1.0 / tb)
        return float(self.svp_20c_kpa) * math.exp(-slope * (1.0 / kelvin(temperature_c)
                                                            - 1.0 / t20))

    def mac_percent(self, age_years: float) -> float:
        """Age-adjusted MAC (vol%): MAC40 × 10^(−0.00269 (age − 40)), Mapleson 1996."""
        return mac_at_age(float(self.mac40_percent), age_years)


def mac_at_age(mac40_percent: float, age_years: float) -> float:
    """Age-adjusted MAC (vol%) from the MAC at 40 years (Mapleson 1996, valid above 1 year)."""
    return mac40_percent * 10.0 ** (-0.00269 * (age_years - 40.0))


# ---- gases ------------------------------------------------------------------------------
NITROGEN = SolubleGas(
    name="nitrogen",
    label="N2",
    molar_mass_g_mol=_s(28.0134, CHEMICALS),
    blood_gas=_s(0.015, "Ostwald coefficient in blood, 37 °C; Weathersby & Homer, Undersea "
                        "Biomed Res 1980;7:277-96 (secondary)"),
    brain_blood=_s(1.0, "lean tissue ≈ water ≈ blood for N2 (memory)"),
    muscle_blood=_s(1.0, "lean tissue ≈ water ≈ blood for N2 (memory)"),
    fat_blood=_s(4.5, "olive oil/gas 0.067 ÷ blood/gas 0.015 (derived; 'about five times more "
                      "soluble in fat than in water')"),
    colour="#7f7f7f",
)

NITROUS_OXIDE = SolubleGas(
    name="nitrous_oxide",
    label="N2O",
    molar_mass_g_mol=_s(44.013, CHEMICALS),
    blood_gas=_s(0.46, TEXTBOOK),
    brain_blood=_s(1.1, TEXTBOOK),
    muscle_blood=_s(1.2, TEXTBOOK),
    fat_blood=_s(2.3, TEXTBOOK),
    mac40_percent=_s(104.0, MAPLESON_1996),
    gwp20=_s(273.0, IPCC_AR6),
    gwp100=_s(273.0, IPCC_AR6),
    colour="#1f3f99",  # ISO 32 medical gas colour for N2O is blue
)

SEVOFLURANE = Agent(
    name="sevoflurane",
    label="Sevoflurane",
    molar_mass_g_mol=_s(200.055, CHEMICALS),
    blood_gas=_s(0.65, TEXTBOOK),
    blood_gas_alternatives=MappingProxyType({"esper2015": _s(0.74, ESPER_2015)}),
    brain_blood=_s(1.70, YASUDA_1989),
    muscle_blood=_s(3.1, TEXTBOOK),
    fat_blood=_s(48.0, TEXTBOOK),
    mac40_percent=_s(1.80, MAPLESON_1996),
    liquid_density_g_ml=_s(1.52, "US product label (specific gravity 1.520-1.525 at 20 °C)"),
    svp_20c_kpa=_s(float(mmhg_to_kpa(157.0)), "US product label: 157 mmHg at 20 °C"),
    boiling_point_c=_s(58.6, "US product label: 58.6 °C"),
    max_dial_percent=_s(8.0, "product labelling: induction up to 8 %; " + COMMON_PRACTICE),
    gwp20=_s(349.0, RYAN_NIELSEN_2010),
    gwp100=_s(130.0, SULBAEK_2012),
    colour="#f2c80f",  # ISO 5360: yellow
)

ISOFLURANE = Agent(
    name="isoflurane",
    label="Isoflurane",
    molar_mass_g_mol=_s(184.49, CHEMICALS),
    blood_gas=_s(1.46, TEXTBOOK),
    blood_gas_alternatives=MappingProxyType({"esper2015": _s(1.45, ESPER_2015)}),
    brain_blood=_s(1.57, YASUDA_1989),
    muscle_blood=_s(2.9, TEXTBOOK),
    fat_blood=_s(45.0, TEXTBOOK),
    mac40_percent=_s(1.17, MAPLESON_1996),
    liquid_density_g_ml=_s(1.496, "product label, 25 °C (memory); 1.49 in Ryan & Nielsen-based "
                                  "data"),
    svp_20c_kpa=_s(31.74, "chemicals package, Wagner equation (Poling): 238 mmHg at 20 °C"),
    boiling_point_c=_s(48.45, "chemicals package: Tb = 321.6 K"),
    max_dial_percent=_s(5.0, COMMON_PRACTICE),
    gwp20=_s(1401.0, RYAN_NIELSEN_2010),
    gwp100=_s(510.0, SULBAEK_2012),
    colour="#8e44ad",  # ISO 5360: purple
)

DESFLURANE = Agent(
    name="desflurane",
    label="Desflurane",
    molar_mass_g_mol=_s(168.04, CHEMICALS),
    blood_gas=_s(0.45, TEXTBOOK),
    blood_gas_alternatives=MappingProxyType({"esper2015": _s(0.57, ESPER_2015)}),
    brain_blood=_s(1.29, YASUDA_1989),
    muscle_blood=_s(2.0, TEXTBOOK),
    fat_blood=_s(27.0, TEXTBOOK),
    mac40_percent=_s(6.6, MAPLESON_1996),
    liquid_density_g_ml=_s(1.465, "product label, 20 °C (memory); 1.45 in Ryan & Nielsen-based "
                                  "data"),
    svp_20c_kpa=_s(float(mmhg_to_kpa(669.0)), "US product label: 669 mmHg at 20 °C"),
    boiling_point_c=_s(22.8, "US product label: 22.8 °C"),
    max_dial_percent=_s(18.0, COMMON_PRACTICE),
    gwp20=_s(3714.0, RYAN_NIELSEN_2010),
    gwp100=_s(2540.0, SULBAEK_2012),
    colour="#2f80c2",  # ISO 5360: blue
)

HALOTHANE = Agent(
    name="halothane",
    label="Halothane",
    molar_mass_g_mol=_s(197.38, CHEMICALS),
    blood_gas=_s(2.54, TEXTBOOK),
    brain_blood=_s(1.94, YASUDA_1989),
    muscle_blood=_s(3.4, TEXTBOOK),
    fat_blood=_s(51.0, TEXTBOOK),
    mac40_percent=_s(0.75, MAPLESON_1996),
    liquid_density_g_ml=_s(1.86, "handbook value at 20 °C (memory)"),
    svp_20c_kpa=_s(32.30, "chemicals package, Antoine (Poling): 242.3 mmHg at 20 °C"),
    boiling_point_c=_s(50.0, "chemicals package: Tb = 323.15 K"),
    max_dial_percent=_s(5.0, COMMON_PRACTICE),
    colour="#d62728",  # ISO 5360: red
)

ENFLURANE = Agent(
    name="enflurane",
    label="Enflurane",
    molar_mass_g_mol=_s(184.49, CHEMICALS),
    blood_gas=_s(1.9, TEXTBOOK),
    brain_blood=_s(1.5, TEXTBOOK),
    muscle_blood=_s(1.7, TEXTBOOK),
    fat_blood=_s(36.0, TEXTBOOK),
    mac40_percent=_s(1.63, MAPLESON_1996),
    liquid_density_g_ml=_s(1.517, "product label, 25 °C (memory)"),
    svp_20c_kpa=_s(22.86, "chemicals package, Wagner equation (Poling): 171.4 mmHg at 20 °C"),
    boiling_point_c=_s(56.8, "chemicals package: Tb = 329.95 K"),
    max_dial_percent=_s(5.0, COMMON_PRACTICE),
    colour="#ff7f0e",  # ISO 5360: orange
)

#: The volatile agents by name.
AGENTS: MappingProxyType = MappingProxyType(
    {a.name: a for a in (SEVOFLURANE, ISOFLURANE, DESFLURANE, HALOTHANE, ENFLURANE)})


def agent_names() -> tuple[str, ...]:
    """Names of the volatile agents circlesim knows."""
    return tuple(AGENTS)


def agent(name: str) -> Agent:
    """The :class:`Agent` called ``name`` (case-insensitive).

    Raises
    ------
    InputError
        If no agent has that name.
    """
    key = str(name).strip().lower()
    if key not in AGENTS:
        raise InputError(
            f"agent must be one of {', '.join(map(repr, AGENTS))}; got {name!r}.")
    return AGENTS[key]

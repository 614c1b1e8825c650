"""The breathing system: circuit, CO2 absorber and vaporizer, validated at construction."""

from __future__ import annotations

from dataclasses import dataclass, field

from circlesim.base.units import MOLAR_VOLUME_STPD_L, STANDARD_PRESSURE_KPA
from circlesim.base.validation import InputError, OneOf, bounded, check_fields, optional_bounded
from circlesim.properties import Agent, agent

__all__ = ["Absorber", "Circuit", "Vaporizer"]


@dataclass(frozen=True)
class Circuit:
    """A circle breathing system.

    Parameters
    ----------
    volume_l : float, L, 0.2–15
        Gas volume of absorber, hoses and ventilator, not counting the reservoir bag.
    bag_l : float, L, 0.5–6
        Reservoir bag (or ventilator bellows) volume when full.
    valve : {"open", "closed"}
        Pressure-limiting valve. Open: the bag starts full and excess gas is vented. Closed:
        nothing is vented until the bag is full; the bag volume then tracks the balance of gas
        in and out, and both running dry and overfilling are reported.
    initial_bag_fill : float or None, 0–1
        Fraction of ``bag_l`` filled at the start; default 1 (open) or 0.5 (closed).
    leak_ml_min : float, mL/min, 0–5000
        Leak from the circuit, at circuit gas composition (circuit conditions).
    sample_ml_min : float, mL/min, 0–500
        Side-stream gas-analyser sample flow.
    sample_returned : bool
        Whether the sample gas is returned to the circuit (otherwise it is lost).
    gas_temperature_c : float, °C, 10–40
        Temperature of the circuit gas and of the flowmeters' calibration.
    ambient_pressure_kpa : float, kPa, 50–110
        Ambient (barometric) pressure.
    inspiratory_fraction : float, 0.2–0.6
        Fraction of the breathing cycle spent in inspiration (I:E 1:2 gives 0.33); sets the
        make-up of the sample gas drawn at the Y-piece.
    vent_exhaled_share : float, 0–1
        Share of the vented gas that is exhaled gas leaving the patient before it reaches the
        absorbent (1: the valve sits in the expiratory limb and vents exhaled gas first, so less
        CO2 reaches the absorbent at higher flows; 0: the valve vents well-mixed circuit gas).
    start_gas : {"fresh_gas", "air"}
        What fills the circuit at time 0: the first step's fresh gas without vapour (a
        circuit flushed before the patient is connected) or room air.
    """

    volume_l: float = field(default=3.0, metadata=bounded(0.2, 15.0, "L"))
    bag_l: float = field(default=2.0, metadata=bounded(0.5, 6.0, "L"))
    valve: str = field(default="open", metadata={"constraint": OneOf(("open", "closed"))})
    initial_bag_fill: float | None = field(default=None, metadata=optional_bounded(0.0, 1.0))
    leak_ml_min: float = field(default=0.0, metadata=bounded(0.0, 5000.0, "mL/min"))
    sample_ml_min: float = field(default=200.0, metadata=bounded(0.0, 500.0, "mL/min"))
    sample_returned: bool = True
    gas_temperature_c: float = field(default=20.0, metadata=bounded(10.0, 40.0, "°C"))
    ambient_pressure_kpa: float = field(default=STANDARD_PRESSURE_KPA,
                                        metadata=bounded(50.0, 110.0, "kPa"))
    inspiratory_fraction: float = field(default=1.0 / 3.0, metadata=bounded(0.2, 0.6))
    vent_exhaled_share: float = field(default=1.0, metadata=bounded(0.0, 1.0))
    start_gas: str = field(default="fresh_gas",
                           metadata={"constraint": OneOf(("fresh_gas", "air"))})

    def __post_init__(self) -> None:
        check_fields(self)
        if not isinstance(self.sample_returned, bool):
            raise InputError("Circuit.sample_returned must be true or false; got "
                             f"{self.sample_returned!r}.")

    @property
    def bag_fill(self) -> float:
        """Initial bag fill fraction actually used."""
        if self.initial_bag_fill is not None:
            return self.initial_bag_fill
        return 1.0 if self.valve == "open" else 0.5

    @property
    def total_volume_l(self) -> float:
        """Gas volume with the bag full, L."""
        return self.volume_l + self.bag_l


@dataclass(frozen=True)
class Absorber:
    """CO2 absorber canister.

    Parameters
    ----------
    granule_mass_g : float, g, 100–5000
        Mass of absorbent granules.
    capacity_l_per_100g : float, L CO2 STPD per 100 g, 2–26
        Usable CO2 capacity. Default 12.1: Sodasorb in a 750 mL canister at 1 L/min
        (Higuchi et al., Anesth Analg 2001;93:221-5; 10.7-14.8 for soda limes, 5.5-7.6 for a
        calcium hydroxide lime).
    breakthrough_start : float, 0.3–0.99
        Fraction of the capacity used when inspired CO2 starts to appear (model assumption).
    used_fraction : float, 0–1
        Fraction already used at the start.
    """

    granule_mass_g: float = field(default=1000.0, metadata=bounded(100.0, 5000.0, "g"))
    capacity_l_per_100g: float = field(default=12.1, metadata=bounded(2.0, 26.0, "L/100 g"))
    breakthrough_start: float = field(default=0.8, metadata=bounded(0.3, 0.99))
    used_fraction: float = field(default=0.0, metadata=bounded(0.0, 1.0))

    def __post_init__(self) -> None:
        check_fields(self)

    @property
    def capacity_l(self) -> float:
        """Total CO2 capacity, L STPD."""
        return self.granule_mass_g / 100.0 * self.capacity_l_per_100g

    @property
    def capacity_mol(self) -> float:
        """Total CO2 capacity, mol."""
        return self.capacity_l / MOLAR_VOLUME_STPD_L


@dataclass(frozen=True)
class Vaporizer:
    """The vaporizer and its agent.

    Parameters
    ----------
    agent : str
        One of :func:`circlesim.properties.agent_names`.
    placement : {"outside", "inside"}
        "outside": a plenum vaporizer in the fresh gas line; its output carries the dial
        concentration and the fresh gas flow grows by the vapour added. "inside": a
        draw-over vaporizer in the inspiratory limb; it adds the dial concentration to every
        breath, so the concentration can climb breath after breath in a closed circuit.
    max_dial_percent : float or None, vol%
        Largest setting; default the agent's usual largest plenum setting.
    """

    agent: str = "sevoflurane"
    placement: str = field(default="outside",
                           metadata={"constraint": OneOf(("outside", "inside"))})
    max_dial_percent: float | None = field(default=None,
                                           metadata=optional_bounded(0.1, 25.0, "vol%"))

    def __post_init__(self) -> None:
        object.__setattr__(self, "agent", agent(self.agent).name)
        check_fields(self)

    @property
    def properties(self) -> Agent:
        """The agent's properties."""
        return agent(self.agent)

    @property
    def max_dial(self) -> float:
        """Largest setting, vol%."""
        if self.max_dial_percent is not None:
            return self.max_dial_percent
        return float(self.properties.max_dial_percent)

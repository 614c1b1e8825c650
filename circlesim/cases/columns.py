"""The columns of a case record's CSV: settings as in scenario steps, measurements as in the CSV
that ``circlesim run`` writes.

Settings columns carry the names of :class:`~circlesim.domain.plan.Step` fields (L/min, vol%,
mL, breaths/min); a cell is given when the setting changes and left empty otherwise.
Measurement columns are ``inspired_<gas>_pct`` and ``end_tidal_<gas>_pct`` in vol%, with
``<gas>`` one of the circuit's gases ("oxygen", "carbon_dioxide", "nitrogen",
"nitrous_oxide") or the record's agent ("sevoflurane", ...), exactly as in
:meth:`circlesim.engine.result.Result.frame`.
"""

from __future__ import annotations

from dataclasses import dataclass

from circlesim.properties import agent_names

__all__ = ["CIRCUIT_GASES", "SETTINGS", "TIME", "MeasuredSeries", "floor_percent",
           "measured_column", "parse_measured_column"]

TIME = "time_min"

#: Settings columns: name -> (unit, lowest, highest), as the Step fields declare them.
SETTINGS = {
    "o2_l_min": ("L/min", 0.0, 15.0),
    "air_l_min": ("L/min", 0.0, 15.0),
    "n2o_l_min": ("L/min", 0.0, 15.0),
    "dial_percent": ("vol%", 0.0, 25.0),
    "inject_ml": ("mL", 0.0, 20.0),
    "tidal_volume_ml": ("mL", 10.0, 2000.0),
    "rate_per_min": ("breaths/min", 4.0, 60.0),
}

#: Gases of the circuit other than the agent, as the result names them.
CIRCUIT_GASES = ("oxygen", "carbon_dioxide", "nitrogen", "nitrous_oxide")

#: Predicted values below these (vol%) are left out of performance errors: the relative error
#: of a value near zero says nothing (Varvel et al. 1992 leave out such samples too). The
#: floors are circlesim's choice, about the resolution of a clinical gas monitor.
_FLOORS = {"agent": 0.1, "oxygen": 1.0, "carbon_dioxide": 0.5, "nitrogen": 1.0,
           "nitrous_oxide": 1.0}


@dataclass(frozen=True)
class MeasuredSeries:
    """One measured series: which gas, where in the breath."""

    site: str  # "inspired" or "end_tidal"
    gas: str   # a gas of the circuit or the agent's name

    @property
    def column(self) -> str:
        """The CSV column name."""
        return measured_column(self.site, self.gas)

    @property
    def label(self) -> str:
        """Text for tables, e.g. "end-tidal sevoflurane"."""
        return f"{self.site.replace('_', '-')} {self.gas.replace('_', ' ')}"


def measured_column(site: str, gas: str) -> str:
    """``inspired_<gas>_pct`` or ``end_tidal_<gas>_pct``."""
    return f"{site}_{gas}_pct"


def parse_measured_column(name: str) -> MeasuredSeries | None:
    """The series a column holds, or None if it is not a measurement column."""
    for site in ("inspired", "end_tidal"):
        prefix = f"{site}_"
        if name.startswith(prefix) and name.endswith("_pct"):
            gas = name[len(prefix):-len("_pct")]
            if gas in CIRCUIT_GASES or gas in agent_names():
                return MeasuredSeries(site, gas)
    return None


def floor_percent(gas: str) -> float:
    """Predicted values below this (vol%) are not scored."""
    return _FLOORS.get(gas, _FLOORS["agent"])

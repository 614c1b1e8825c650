"""Published human data the model is held against, and the model's value for each.

Every check names its source, the published value, how sure we are of that value, and a
tolerance. ``asserted`` checks are held by the test suite; the others are reported in
``docs/validation.md`` so that a researcher sees at a glance where the model stands, failures
included. Regenerate the table with ``python -m circlesim.published docs/validation.md``.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from dataclasses import dataclass
from functools import cache

import numpy as np

from .equipment import Circuit, Vaporizer
from .patient import Patient
from .plan import Plan, Step
from .properties import agent as agent_properties
from .result import Result
from .simulate import simulate
from .units import vapour_l_stpd_to_liquid_ml

__all__ = ["CHECKS", "PublishedCheck", "validation_table"]

YASUDA = ("Yasuda N et al., Anesth Analg 1991;72:316-24 and Anesthesiology 1991;74:489-98")

#: Healthy young adult volunteer (Yasuda et al. studied young men).
VOLUNTEER = Patient(weight_kg=70.0, height_cm=178.0, age_years=30.0, sex="male")
#: Nearly non-rebreathing delivery: a small circuit washed by 20 L/min, so inspired ≈ fresh gas.
NON_REBREATHING = Circuit(volume_l=0.3, bag_l=0.5)


@dataclass(frozen=True)
class PublishedCheck:
    """One published value and how to compute the model's counterpart.

    Attributes
    ----------
    key : str
    case : str
        What is compared, in words.
    source : str
    confidence : str
        How the published value was obtained here: "abstract", "secondary", "memory",
        "derived" (computed from a published equation).
    published : float
    tolerance : float
        Absolute tolerance, in ``unit``.
    unit : str
    compute : callable
        Returns the model's value.
    asserted : bool
        Whether the test suite holds the model to it.
    """

    key: str
    case: str
    source: str
    confidence: str
    published: float
    tolerance: float
    unit: str
    compute: Callable[[], float]
    asserted: bool = True

    def model_value(self) -> float:
        """The model's value (cached per process)."""
        return _cached(self.key)

    def passes(self) -> bool:
        """Whether the model lies within the tolerance of the published value."""
        return abs(self.model_value() - self.published) <= self.tolerance


@cache
def _run_yasuda(agent: str, inspired_percent: float) -> Result:
    plan = Plan([Step(0, o2_l_min=7.0, n2o_l_min=13.0),
                 Step(30, dial_percent=inspired_percent)], duration_min=60)
    return simulate(VOLUNTEER, NON_REBREATHING, plan, vaporizer=Vaporizer(agent),
                    output_interval_min=0.25)


def yasuda_fa_fi(agent: str, inspired_percent: float, minutes: float) -> float:
    """FA/FI of ``agent`` ``minutes`` after it is added at constant inspired concentration to
    65 % N2O that has run for 30 min (the protocol of Yasuda et al. 1991)."""
    r = _run_yasuda(agent, inspired_percent)
    ratio = r.end_tidal_percent("agent") / np.maximum(r.inspired_percent("agent"), 1e-12)
    return r.at(30.0 + minutes, ratio)


@cache
def constant_end_tidal_uptake(agent: str, mac_multiple: float, duration: float, weight: float,
                        age: float) -> tuple[np.ndarray, np.ndarray]:
    """Time and cumulative agent uptake (L STPD) at a constant end-tidal concentration.

    The end-tidal concentration is held by a very high ventilation and fresh gas flow so that
    FA ≈ FI; the uptake is scaled to the exact target at every time.
    """
    target = mac_multiple * agent_properties(agent).mac_percent(age)
    patient = Patient(weight_kg=weight, height_cm=172.0, age_years=age)
    plan = Plan([Step(0, o2_l_min=10.0, air_l_min=10.0, dial_percent=target,
                      tidal_volume_ml=1500.0, rate_per_min=30.0)], duration_min=duration)
    r = simulate(patient, NON_REBREATHING, plan, vaporizer=Vaporizer(agent),
                 output_interval_min=0.5)
    ia = r.gas_index("agent")
    uptake = r.uptake_stpd[:, ia] * target / np.maximum(r.end_tidal_percent("agent"), 1e-12)
    cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (uptake[1:] + uptake[:-1])
                                                  * np.diff(r.time_min))])
    return r.time_min, cumulative


def liquid_uptake_ml(agent: str, mac_multiple: float, minutes: float, weight: float = 70.0,
                     age: float = 45.0) -> float:
    """Liquid agent (mL) taken up by the body in ``minutes`` at constant end-tidal agent."""
    t, cumulative = constant_end_tidal_uptake(agent, mac_multiple, max(minutes, 60.0), weight, age)
    a = agent_properties(agent)
    vapour = float(np.interp(minutes, t, cumulative))
    return float(vapour_l_stpd_to_liquid_ml(vapour, a.liquid_density_g_ml, a.molar_mass_g_mol))


def pal_2001_cumulative_ml(minutes: float) -> float:
    """Cumulative isoflurane use (mL liquid, 70 kg, 1.3 MAC closed circuit) from the
    tri-exponential usage equation of Pal, Lockwood & White, Br J Anaesth 2001;86:645-9."""
    terms = ((0.44, 0.51), (0.044, 0.013), (0.058, 0.00098))
    return float(sum(a / k * (1.0 - np.exp(-k * minutes)) for a, k in terms))


@cache
def _eight_hour_run(agent: str) -> Result:
    """1.25 MAC held for 8 h at 2 L/min in a circle by a proportional dial controller that
    adjusts every 2 min (the protocol of Eger et al. 1997: volunteers, 1.25 MAC, 2 L/min)."""
    patient = Patient(weight_kg=70.0, height_cm=175.0, age_years=30.0)
    target = 1.25 * agent_properties(agent).mac_percent(30.0)
    state = None
    dial = 1.2 * target
    max_dial = float(agent_properties(agent).max_dial_percent)
    result = None
    for _ in range(240):
        plan = Plan([Step(0, o2_l_min=1.0, air_l_min=1.0, dial_percent=min(dial, max_dial))],
                    duration_min=2.0)
        result = simulate(patient, Circuit(), plan, vaporizer=Vaporizer(agent),
                          initial_state=state, output_interval_min=1.0)
        state = result.final_state
        error = target - result.end_tidal_percent("agent")[-1]
        dial = max(0.0, dial + 1.5 * error)
    return result


def fi_over_fa_at_8_hours(agent: str) -> float:
    """FI/FA at the end of the 8-hour run of :func:`_eight_hour_run`."""
    r = _eight_hour_run(agent)
    return float(r.inspired_percent("agent")[-1] / r.end_tidal_percent("agent")[-1])


def _second_gas_gain() -> float:
    def ratio(n2o_fraction: float) -> float:
        rest = 20.0 * (1.0 - n2o_fraction)
        plan = Plan([Step(0, o2_l_min=min(rest, 15.0), air_l_min=max(rest - 15.0, 0.0),
                          n2o_l_min=20.0 - rest, dial_percent=1.0)], duration_min=5)
        r = simulate(VOLUNTEER, NON_REBREATHING, plan, output_interval_min=0.25)
        return r.at(2.0, r.end_tidal_percent("agent")
                    / np.maximum(r.inspired_percent("agent"), 1e-12))
    return 100.0 * (ratio(0.70) / ratio(0.0) - 1.0)


CHECKS: tuple[PublishedCheck, ...] = (
    PublishedCheck("yasuda_des_30", "FA/FI desflurane 2 % at 30 min", YASUDA, "secondary",
                   0.90, 0.05, "", lambda: yasuda_fa_fi("desflurane", 2.0, 30.0)),
    PublishedCheck("yasuda_sevo_30", "FA/FI sevoflurane 1 % at 30 min", YASUDA, "secondary",
                   0.85, 0.05, "", lambda: yasuda_fa_fi("sevoflurane", 1.0, 30.0)),
    PublishedCheck("yasuda_iso_30", "FA/FI isoflurane 0.4 % at 30 min", YASUDA, "secondary",
                   0.73, 0.05, "", lambda: yasuda_fa_fi("isoflurane", 0.4, 30.0)),
    PublishedCheck("yasuda_halo_30", "FA/FI halothane at 30 min", YASUDA, "memory",
                   0.58, 0.07, "", lambda: yasuda_fa_fi("halothane", 0.3, 30.0)),
    PublishedCheck("peyton_second_gas", "End-tidal sevoflurane PA/PI with 70 % N2O vs none, "
                   "2 min", "Peyton PJ et al., Anesthesiology 2008;108:381 (abstract)",
                   "abstract", 9.8, 6.0, "% higher", _second_gas_gain),
    PublishedCheck("pal_iso_60", "Isoflurane taken up at 1.3 MAC, first 60 min (70 kg)",
                   "Pal SK, Lockwood GG, White DC, Br J Anaesth 2001;86:645-9 (usage equation)",
                   "derived", pal_2001_cumulative_ml(60.0), 0.3 * pal_2001_cumulative_ml(60.0),
                   "mL liquid", lambda: liquid_uptake_ml("isoflurane", 1.3, 60.0),
                   asserted=False),
    PublishedCheck("pal_iso_180", "Isoflurane taken up at 1.3 MAC, first 3 h (70 kg)",
                   "Pal SK, Lockwood GG, White DC, Br J Anaesth 2001;86:645-9 (usage equation)",
                   "derived", pal_2001_cumulative_ml(180.0), 0.3 * pal_2001_cumulative_ml(180.0),
                   "mL liquid", lambda: liquid_uptake_ml("isoflurane", 1.3, 180.0),
                   asserted=False),
    PublishedCheck("pal_iso_480", "Isoflurane taken up at 1.3 MAC, first 8 h (70 kg)",
                   "Pal SK, Lockwood GG, White DC, Br J Anaesth 2001;86:645-9 (usage equation)",
                   "derived", pal_2001_cumulative_ml(480.0), 0.3 * pal_2001_cumulative_ml(480.0),
                   "mL liquid", lambda: liquid_uptake_ml("isoflurane", 1.3, 480.0),
                   asserted=False),
    PublishedCheck("eger_des_8h", "FI/FA desflurane at 8 h, 1.25 MAC, 2 L/min",
                   "Eger EI II et al., Anesthesiology 1997;87:517-26 (abstract)", "abstract",
                   1.06, 0.02, "", lambda: fi_over_fa_at_8_hours("desflurane"),
                   asserted=False),
    PublishedCheck("eger_sevo_8h", "FI/FA sevoflurane at 8 h, 1.25 MAC, 2 L/min",
                   "Eger EI II et al., Anesthesiology 1997;87:517-26 (abstract)", "abstract",
                   1.11, 0.03, "", lambda: fi_over_fa_at_8_hours("sevoflurane"),
                   asserted=False),
)

_BY_KEY = {c.key: c for c in CHECKS}


@cache
def _cached(key: str) -> float:
    return float(_BY_KEY[key].compute())


def validation_table() -> str:
    """The checks as a markdown table: case, source, published, model, tolerance, result."""
    lines = ["| case | source | value from | published | model | tolerance | result |",
             "|---|---|---|---|---|---|---|"]
    for c in CHECKS:
        value = c.model_value()
        verdict = "pass" if c.passes() else "**fail**"
        if not c.asserted:
            verdict += " (reported)"
        unit = f" {c.unit}" if c.unit else ""
        lines.append(f"| {c.case} | {c.source} | {c.confidence} | {c.published:.3g}{unit} | "
                     f"{value:.3g}{unit} | ±{c.tolerance:.2g}{unit} | {verdict} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """Write ``docs/validation.md`` (or print the table when no path is given)."""
    from .files import write_text_atomic

    argv = sys.argv[1:] if argv is None else argv
    text = _PREAMBLE + "\n" + validation_table() + "\n" + _POSTSCRIPT
    if argv:
        write_text_atomic(argv[0], text, overwrite=True)
    else:
        print(text)
    return 0


_PREAMBLE = """# Validation: the model against published data

This file is generated by `python -m circlesim.published docs/validation.md` (`make
validation`) from the checks in `circlesim/published.py`; do not edit it by hand. "value from"
says how the published number was obtained here: *abstract* (read in the paper's abstract),
*secondary* (quoted by a secondary source), *memory* (written down from memory, not checked),
*derived* (computed from a published equation). Checks marked "(reported)" are not held by
the test suite; they show where the model stands, failures included. The test suite also
holds orderings and directions that are not single numbers (the FA/FI ranking of agents,
the concentration and second-gas effects, conservation, exact solutions): see `tests/`.
"""

_POSTSCRIPT = """
## Reading the long-case rows

The model runs with intertissue diffusion from muscle to the fat next to it switched on (see
`docs/model.md`). Isoflurane uptake over 1-8 hours sits above the usage equation of Pal et al.
(2001), while the 8-hour FI/FA ratios of Eger et al. (1997) are higher than the model gives.
The published long-case data disagree with each other under any single set of textbook
tissue parameters; the model's long-case uptake should be read with that spread in mind.
"""

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

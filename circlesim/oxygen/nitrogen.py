"""Nitrogen: the body's store, denitrogenation, and build-up in a closed or near-closed circuit.

The body's nitrogen store is what the model holds at the start of every plan: the patient has
been breathing room air, so every tissue is in equilibrium with alveolar nitrogen. A tissue of
volume ``V`` (L) with blood/gas coefficient ``λ_b`` and tissue/blood coefficient ``λ_t`` holds
``k_body · V · λ_b · λ_t · F_A,N2`` litres STPD (``k_body`` from
:func:`circlesim.base.units.btps_to_stpd`); the lungs hold ``k_body · FRC · F_A,N2``. Tissue volumes
come from :meth:`circlesim.domain.patient.Patient.tissues`, the coefficients from
:data:`circlesim.properties.NITROGEN`.

:func:`denitrogenation_study` compares initial high-flow periods of chosen lengths before a
closed (or near-closed) circuit and follows the nitrogen that the body then releases into it.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from circlesim.base.validation import InputError, Interval, check_choice, check_number
from circlesim.domain.plan import Plan, Step
from circlesim.engine import layout
from circlesim.engine.assembly import assemble
from circlesim.engine.result import Result
from circlesim.oxygen.setup import FreshGas, Setup, minimum_fgf_l_min

__all__ = ["DenitrogenationRun", "NitrogenStore", "body_nitrogen_store",
           "denitrogenation_study", "tissue_nitrogen_l"]


@dataclass(frozen=True)
class NitrogenStore:
    """Nitrogen held by the patient breathing room air, L STPD.

    Attributes
    ----------
    tissue_l : dict of str to float
        Per tissue group (vessel-rich, muscle, fat, ...), L STPD.
    dissolved_l : float
        Sum over the tissue groups, L STPD.
    lungs_l : float
        Alveolar gas (FRC), L STPD.
    alveolar_n2_fraction : float
        Dry-gas N2 fraction in the alveoli breathing air.
    """

    tissue_l: dict[str, float]
    dissolved_l: float
    lungs_l: float
    alveolar_n2_fraction: float


def _tissue_capacity(setup: Setup):
    probe = Plan((Step(0.0, o2_l_min=1.0),), duration_min=1.0)
    inputs = assemble(setup.patient, setup.circuit, setup.absorber, setup.vaporizer, probe)
    capacity = inputs.params[0][layout.parameter_slices(inputs.lay)["tissue_capacity"]].reshape(
        len(inputs.tissue_names), -1)[:, layout.N2 - layout.FIRST_SOLUBLE]
    return inputs, capacity


def body_nitrogen_store(setup: Setup) -> NitrogenStore:
    """The patient's nitrogen store at the start of a plan (breathing room air)."""
    inputs, capacity = _tissue_capacity(setup)
    fa = float(inputs.y0[layout.state_slices(inputs.lay)["alveolar"]][layout.N2])
    tissue = {name: float(c * fa) for name, c in zip(inputs.tissue_names, capacity, strict=True)}
    return NitrogenStore(tissue_l=tissue, dissolved_l=float(sum(tissue.values())),
                         lungs_l=float(inputs.k_body * setup.patient.frc * fa),
                         alveolar_n2_fraction=fa)


def tissue_nitrogen_l(result: Result) -> np.ndarray:
    """Nitrogen dissolved in the patient's tissues over time, L STPD, shape (T,)."""
    setup = Setup(result.patient, result.circuit, result.vaporizer, result.absorber)
    _, capacity = _tissue_capacity(setup)
    return result.tissue[:, :, result.soluble_index("nitrogen")] @ capacity


@dataclass(frozen=True)
class DenitrogenationRun:
    """One denitrogenation schedule and what followed.

    Attributes
    ----------
    high_flow_min : float
        Length of the initial high-flow period, min (after any pre-oxygenation).
    low_flow_start_min : float
        When the closed or near-closed circuit began, min.
    result : Result
    body_n2_at_start_l : float
        Nitrogen left dissolved in the body when the low flow began, L STPD.
    released_l : float
        Nitrogen the body released from then to the end of the plan, L STPD.
    peak_inspired_n2 : float
        Highest inspired N2 fraction after the low flow began.
    peak_time_min : float
    final_inspired_n2 : float
        Inspired N2 fraction at the end of the plan.
    """

    high_flow_min: float
    low_flow_start_min: float
    result: Result
    body_n2_at_start_l: float
    released_l: float
    peak_inspired_n2: float
    peak_time_min: float
    final_inspired_n2: float


def denitrogenation_study(setup: Setup, high_flow_minutes: Iterable[float] = (2.0, 10.0), *,
                          high_flow: FreshGas | None = None, preoxygenation_min: float = 0.0,
                          low_flow: FreshGas | None = None, valve: str = "open",
                          duration_min: float = 240.0,
                          output_interval_min: float = 1.0) -> list[DenitrogenationRun]:
    """Nitrogen build-up after initial high-flow periods of different lengths.

    Parameters
    ----------
    setup : Setup
    high_flow_minutes : sequence of float, min, each 0–600
        Lengths of the initial high-flow period to compare.
    high_flow : FreshGas or None
        Its make-up (default 10 L/min of O2).
    preoxygenation_min : float, min, 0–60
        O2 at 10 L/min before the high-flow period (same for every run).
    low_flow : FreshGas or None
        Make-up afterwards (default: O2 alone at :func:`circlesim.oxygen.setup.minimum_fgf_l_min`,
        the closed-circuit supply).
    valve : {"open", "closed"}
        Pressure-limiting valve during the low flow. The bag is full when the low flow starts
        (the high-flow period fills it), so with either setting the nitrogen the body releases
        makes the bag overflow through the valve; "closed" also raises the overfill alert.
    duration_min : float, min
        Length of each plan.
    output_interval_min : float, min

    Returns
    -------
    list of DenitrogenationRun
        In the order of ``high_flow_minutes``.
    """
    owner = "denitrogenation_study"
    minutes = [check_number(owner, f"high_flow_minutes[{i}]", v, Interval(0.0, 600.0, "min"))
               for i, v in enumerate(high_flow_minutes)]
    if not minutes:
        raise InputError(f"{owner}.high_flow_minutes must hold at least one duration; got none.")
    check_number(owner, "preoxygenation_min", preoxygenation_min, Interval(0.0, 60.0, "min"))
    valve = check_choice(owner, "valve", valve, ("open", "closed"))
    high = FreshGas(10.0, 1.0) if high_flow is None else high_flow
    low = FreshGas(minimum_fgf_l_min(setup), 1.0) if low_flow is None else low_flow
    runs = []
    for length in minutes:
        steps = []
        t = 0.0
        if preoxygenation_min > 0.0:
            steps.append(Step(t, **FreshGas(10.0, 1.0).settings(), valve="open",
                              note="pre-oxygenation"))
            t += preoxygenation_min
        if length > 0.0:
            steps.append(Step(t, **high.settings(), valve="open", note="high flow"))
            t += length
        if not t < duration_min:
            raise InputError(f"{owner}.duration_min must be longer than pre-oxygenation plus "
                             f"the high-flow period ({t:g} min); got {duration_min:g}.")
        steps.append(Step(t, **low.settings(), valve=valve, note="low flow"))
        result = setup.simulate(Plan(tuple(steps), duration_min=duration_min,
                                     name=f"{length:g} min high flow"),
                                output_interval_min=output_interval_min)
        body = tissue_nitrogen_l(result)
        n2 = result.inspired[:, result.gas_index("nitrogen")]
        after = result.time_min >= t
        start = int(np.flatnonzero(after)[0])
        peak = start + int(np.argmax(n2[after]))
        runs.append(DenitrogenationRun(
            high_flow_min=length, low_flow_start_min=t, result=result,
            body_n2_at_start_l=float(body[start]), released_l=float(body[start] - body[-1]),
            peak_inspired_n2=float(n2[peak]), peak_time_min=float(result.time_min[peak]),
            final_inspired_n2=float(n2[-1])))
    return runs

"""Minimum alveolar concentration: age-adjusted MAC, MAC of several gases added, MAC-hours.

Source of every formula: Mapleson WW. Effect of age on MAC in humans: a meta-analysis.
Br J Anaesth 1996;76:179–85. MAC falls log-linearly with age at the same rate for every agent
and for N2O, ``MAC(age) = MAC40 × 10^(−0.00269 (age − 40))`` (valid above 1 year), and MAC
fractions of agents given together add (the same paper's isobologram assumption; Nickalls &
Mapleson, Br J Anaesth 2003;91:170–4 draw their iso-MAC charts this way).
"""

from __future__ import annotations

import numpy as np

from circlesim.base.validation import InputError, Interval, check_number
from circlesim.properties import NITROUS_OXIDE, agent, mac_at_age

__all__ = [
    "AGE_RANGE",
    "age_adjusted_mac",
    "agent_percent_for_total_mac",
    "mac_hours",
    "nitrous_oxide_mac",
    "total_mac",
]

#: Ages for which Mapleson's relation is given, years.
AGE_RANGE = Interval(1.0, 110.0, "years")


def age_adjusted_mac(agent_name: str, age_years: float) -> float:
    """Age-adjusted MAC of a volatile agent, vol% (Mapleson 1996).

    Parameters
    ----------
    agent_name : str
        A name from :func:`circlesim.agent_names`.
    age_years : float, years, 1–110

    Returns
    -------
    float
        vol%.
    """
    age = check_number("age_adjusted_mac", "age_years", age_years, AGE_RANGE)
    return mac_at_age(float(agent(agent_name).mac40_percent), age)


def nitrous_oxide_mac(age_years: float) -> float:
    """Age-adjusted MAC of N2O, vol% (Mapleson 1996: 104 % at 40 years).

    Parameters
    ----------
    age_years : float, years, 1–110
    """
    age = check_number("nitrous_oxide_mac", "age_years", age_years, AGE_RANGE)
    return mac_at_age(float(NITROUS_OXIDE.mac40_percent), age)


def total_mac(agent_percent, agent_mac_percent: float, n2o_percent=0.0,
              n2o_mac_percent: float | None = None):
    """MAC multiples of an agent and N2O added: ``F_agent / MAC_agent + F_N2O / MAC_N2O``.

    Parameters
    ----------
    agent_percent : float or ndarray, vol%
        End-tidal agent.
    agent_mac_percent : float, vol%, > 0
        The agent's (age-adjusted) MAC.
    n2o_percent : float or ndarray, vol%
        End-tidal N2O.
    n2o_mac_percent : float, vol%, > 0, optional
        Age-adjusted MAC of N2O; required when ``n2o_percent`` is not zero.

    Returns
    -------
    float or ndarray
        Total MAC (dimensionless multiple).
    """
    check_number("total_mac", "agent_mac_percent", agent_mac_percent,
                 Interval(0.0, 200.0, "vol%", low_open=True))
    out = np.asarray(agent_percent, dtype=float) / agent_mac_percent
    n2o = np.asarray(n2o_percent, dtype=float)
    if np.any(n2o != 0.0):
        if n2o_mac_percent is None:
            raise InputError("total_mac.n2o_mac_percent must be given when n2o_percent is not "
                             "zero; got None.")
        check_number("total_mac", "n2o_mac_percent", n2o_mac_percent,
                     Interval(0.0, 200.0, "vol%", low_open=True))
        out = out + n2o / n2o_mac_percent
    return float(out) if out.ndim == 0 else out


def agent_percent_for_total_mac(total: float, agent_name: str, age_years: float,
                                n2o_percent: float = 0.0) -> float:
    """End-tidal agent (vol%) that, with ``n2o_percent`` N2O, gives ``total`` age-adjusted MAC.

    Parameters
    ----------
    total : float, MAC, 0–5
        Target total MAC.
    agent_name : str
    age_years : float, years, 1–110
    n2o_percent : float, vol%, 0–100
        End-tidal N2O.

    Returns
    -------
    float
        vol%; 0 when N2O alone reaches the target.
    """
    check_number("agent_percent_for_total_mac", "total", total, Interval(0.0, 5.0, "MAC"))
    check_number("agent_percent_for_total_mac", "n2o_percent", n2o_percent,
                 Interval(0.0, 100.0, "vol%"))
    remaining = total - n2o_percent / nitrous_oxide_mac(age_years)
    return max(remaining, 0.0) * age_adjusted_mac(agent_name, age_years)


def mac_hours(time_min, mac_multiple) -> float:
    """MAC-hours: the time integral of the MAC multiple, in hours (trapezoidal rule).

    Parameters
    ----------
    time_min : ndarray, shape (T,), min
    mac_multiple : ndarray, shape (T,)
        End-tidal concentration as a multiple of MAC.
    """
    t = np.asarray(time_min, dtype=float)
    y = np.asarray(mac_multiple, dtype=float)
    if t.shape != y.shape or t.ndim != 1:
        raise InputError(f"mac_hours needs time_min and mac_multiple of the same shape (T,); got "
                         f"{t.shape} and {y.shape}.")
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(t)) / 60.0)

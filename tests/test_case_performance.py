"""Varvel's performance measures against a small example worked by hand.

Source: Varvel JR, Donoho DL, Shafer SL. J Pharmacokinet Biopharm 1992;20:63-94:
PE = (measured - predicted) / predicted x 100 %; MDPE = median PE; MDAPE = median |PE|;
divergence = least-squares slope of |PE| against time (% per hour); wobble = median |PE - MDPE|.
"""

import math

import numpy as np
import pytest

from circlesim.cases.performance import Performance, performance, pooled


def test_worked_example():
    # time 0, 1, 2, 3 h; measured 2, 4, 3, 5; predicted 2.5, 4, 2, 4
    # PE = -20, 0, +50, +25 %
    # MDPE = median(-20, 0, 25, 50) = 12.5 %
    # |PE| = 20, 0, 50, 25 -> MDAPE = median(0, 20, 25, 50) = 22.5 %
    # |PE - MDPE| = 32.5, 12.5, 37.5, 12.5 -> wobble = median = 22.5 %
    # divergence: mean t = 1.5 h, mean |PE| = 23.75; sum (t - 1.5)(|PE| - 23.75) = 32.5;
    # sum (t - 1.5)^2 = 5 -> slope 6.5 % per hour
    p = performance(np.array([0.0, 60.0, 120.0, 180.0]), np.array([2.0, 4.0, 3.0, 5.0]),
                    np.array([2.5, 4.0, 2.0, 4.0]))
    assert p.n == 4
    assert p.mdpe_percent == pytest.approx(12.5)
    assert p.mdape_percent == pytest.approx(22.5)
    assert p.wobble_percent == pytest.approx(22.5)
    assert p.divergence_percent_h == pytest.approx(6.5)


def test_floor_and_missing_values_are_not_scored():
    p = performance(np.array([0.0, 1.0, 2.0]), np.array([np.nan, 0.2, 1.1]),
                    np.array([1.0, 0.05, 1.0]), floor=0.1)
    assert p.n == 1 and p.mdpe_percent == pytest.approx(10.0)
    assert math.isnan(p.divergence_percent_h)  # one sample spans no time
    assert performance(np.array([0.0]), np.array([np.nan]), np.array([1.0])) is None


def test_pooled_is_the_median_of_the_cases():
    cases = [Performance(5, 10.0, 20.0, 1.0, 5.0), Performance(5, -4.0, 8.0, math.nan, 3.0),
             Performance(5, 2.0, 12.0, 3.0, 4.0)]
    p = pooled(cases)
    assert (p.n, p.mdpe_percent, p.mdape_percent, p.wobble_percent) == (3, 2.0, 12.0, 4.0)
    assert p.divergence_percent_h == pytest.approx(2.0)  # NaN left out

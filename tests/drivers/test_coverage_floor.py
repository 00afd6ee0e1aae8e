"""The emulator sweeps' pass mark (``emulator_rig.coverage_floor``) against the binomial law.

The floor is the fewest points, of n, whose truth lies inside both 95 % intervals that honest
intervals still reach in all but one run in a thousand. Checked against the binomial
probabilities summed by hand (math.comb, not scipy) and by simulating honest runs with
jointly normal gain and phase errors of either sign of correlation (Šidák's inequality says
the joint coverage is at least 0.95² whatever the correlation; Šidák 1967, J. Am. Stat.
Assoc. 62, 626). What the mark catches, and what it does not: a path that shifts every point's
phase by three standard uncertainties (a lost latency, a swapped channel, a gap misread) fails
in nearly every run; intervals too narrow by a factor of two fail only in about half the runs
with ten points, which is why the width of the intervals is judged by the Monte Carlo coverage
tests (tests/core/test_coverage.py, 1200 trials, two-sided), not here. Fast, no audio server.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from emulator_rig import coverage_floor

P_JOINT = 0.95 ** 2


def _below(k: int, n: int, p: float) -> float:
    """P(count < k) for a binomial count of n trials with probability p (summed by hand)."""
    return sum(math.comb(n, j) * p**j * (1 - p) ** (n - j) for j in range(k))


@pytest.mark.parametrize("n", range(4, 13))
def test_the_floor_is_the_largest_count_honest_intervals_miss_at_most_once_in_a_thousand(n):
    k = coverage_floor(n)
    assert _below(k, n, P_JOINT) <= 1e-3 < _below(k + 1, n, P_JOINT), (n, k)


@pytest.mark.parametrize("rho", [-0.8, 0.0, 0.8])
def test_honest_runs_pass_and_a_three_sigma_fault_of_the_path_fails(rho):
    rng = np.random.default_rng(3)
    n, runs = 10, 20000
    z = rng.multivariate_normal([0.0, 0.0], [[1.0, rho], [rho, 1.0]], size=(runs, n))
    z95 = 1.959964                      # two-sided 95 % normal quantile (any statistics table)
    honest = np.all(np.abs(z) <= z95, axis=2).sum(axis=1)
    shifted = z + np.array([0.0, 3.0])  # every phase off by three standard uncertainties
    faulty = np.all(np.abs(shifted) <= z95, axis=2).sum(axis=1)
    floor = coverage_floor(n)
    assert np.mean(honest < floor) <= 2e-3          # one false alarm in a thousand (+ simulation noise)
    assert np.mean(faulty < floor) >= 0.99          # the fault is caught

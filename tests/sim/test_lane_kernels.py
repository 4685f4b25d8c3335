"""Per-lane hazard parameters (sim.hazards.LaneHazards): many hazards of one family evaluated in one
call, each lane with its own hazard's numbers.

- A lane's conditional time equals its own hazard's (the public ``conditional_time`` over its lanes
  alone), bit for bit, for every family with a per-lane kernel, with and without hazard ratios that
  differ per lane (lanes whose ``e / hr`` over- or underflows are reported as lost, as the engine
  then evaluates them by their own hazard), at clocks from 0 to the largest double and draws from 0
  to +inf.
- Iterations stop lane by lane: a lane computed alone equals the same lane among others (Newton
  polishing of the log-normal and gamma inversions, the gamma's far tail and continued fraction,
  the Gompertz-Makeham's Halley iteration); forms are chosen lane by lane (Gompertz and
  Gompertz-Makeham slopes of both signs and 0 and Makeham constants of 0 share one call).
- The times are right: ``H(x + T) - H(x) = e`` in 40-digit arithmetic (mpmath; the check of
  tests/sim/test_hazard_edges.py, K eps with K = 64) and, for band rates per lane, against the
  piecewise closed form summed exactly (math.fsum).
- The per-row band search equals numpy's searchsorted; families without a shared kernel are refused.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sim.hazards import (KERNEL_ERRSTATE, AtLeastHazard, Exponential, Gamma, Gompertz, GompertzMakeham, LaneHazards,
                         LogLogistic, LogNormal, PiecewiseConstant, Weibull)
from sim.hazards.piecewise import _search_right

from .test_hazard_edges import check

EPS = 2.0 ** -52
K = 64

FAMILIES = {
    "exponential": [Exponential(r) for r in (0.0, 1e-300, 0.12, 3.0, 1e300)],
    "weibull": [Weibull(k, s) for k, s in ((1.3, 8.0), (0.4, 0.01), (50.0, 3.0), (1.0, 1e-300), (0.05, 1e300))],
    "loglogistic": [LogLogistic(k, s) for k, s in ((2.0, 5.0), (0.3, 100.0), (40.0, 0.5), (1.0, 1e-200))],
    "lognormal": [LogNormal(m, s) for m, s in ((1.0, 0.5), (-3.0, 2.5), (4.0, 0.01), (0.0, 1e-3), (600.0, 3.0))],
    "gamma": [Gamma(a, s) for a, s in ((2.0, 3.0), (0.3, 0.5), (40.0, 0.1), (1.0, 1e-3), (5e3, 1e-2))],
    # slopes of both signs (g < 0 improper), 0, subnormal and steep, rates from subnormal to huge
    "gompertz": [Gompertz(r, g) for r, g in ((2e-5, 0.09), (1e-300, 0.09), (0.5, -0.3), (1e300, 0.0), (0.05, 0.0),
                                             (3e-3, -5e-324), (0.02, 5e-324), (1e-4, 700.0), (0.2, -40.0))],
    # constants 0 (the Gompertz form), subnormal and large; slopes of both signs and 0 (e / (b + c))
    "gompertz_makeham": [GompertzMakeham(b, g, c) for b, g, c in (
        (1e-4, 0.08, 0.002), (0.5, -0.3, 0.01), (0.05, 0.0, 0.1), (2e-5, 0.09, 0.0), (0.3, -0.05, 0.0),
        (1e-300, 0.1, 5e-324), (1e300, 0.0, 1e300), (1e-250, 0.5, 1e-260), (3.0, -2.0, 1e-3), (1e-6, 700.0, 0.4))],
    "piecewise": [PiecewiseConstant((0.0, 1.0, 5.0, 20.0), rates) for rates in
                  ((0.1, 0.0, 0.3, 2.0), (1e300, 1e308, 0.0, 0.0), (0.0, 0.0, 0.0, 1e-3), (5.0, 4.0, 3.0, 0.0))],
}


def _lanes(n: int, n_codes: int, seed: int):
    """Clocks from 0 to the largest double, draws from 0 to +inf (edge values included), codes."""
    rng = np.random.default_rng(seed)
    x = np.concatenate([np.zeros(n // 5), rng.exponential(10.0, n // 2), 10.0 ** rng.uniform(-300, 300, n // 5)])
    x = np.concatenate([x, [1e-310, 1e308, 1.7e308, 2.0, 700.0, 1e5]])
    edge = [0.0, np.inf, 1e-300, 5e-324, 1e300, 700.0, 1e5, 1e17, 1.7e308, 1e-17]
    e = np.concatenate([rng.exponential(1.0, x.size - len(edge)), edge])
    rng.shuffle(e)
    return x, e, rng.integers(0, n_codes, x.size)


def _own(hazards, codes, x, e):
    """Each lane from its own hazard, the lanes of one hazard in one public call."""
    out = np.empty_like(x)
    for c, h in enumerate(hazards):
        m = codes == c
        out[m] = h.conditional_time(x[m], e[m])
    return out


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_each_lane_gets_the_bits_of_its_own_hazard(family):
    hazards = FAMILIES[family]
    x, e, codes = _lanes(3000, len(hazards), seed=len(family))
    lanes = LaneHazards.of(hazards)
    assert lanes is not None and lanes.family == family and not lanes.ratio
    with np.errstate(**KERNEL_ERRSTATE):
        t, lost = lanes.times(codes, x, e)
    assert lost is None
    own = _own(hazards, codes, x, e)
    assert not np.isnan(own).any()
    np.testing.assert_array_equal(t, own)


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_hazard_ratios_per_lane_get_the_bits_of_their_own_hazard(family):
    # every base under its own ratio (one without any, one of 0, ratios whose e / hr over- or
    # underflows); lanes reported lost are evaluated by their own hazard, as the engine does
    ratios = (0.6, 1.0, 0.0, 1e308, 5e-324, 1e-310, 3.0)
    bases = FAMILIES[family]
    hazards = [bases[i % len(bases)].scaled(hr) for i, hr in enumerate(ratios)]
    x, e, codes = _lanes(2000, len(hazards), seed=7)
    lanes = LaneHazards.of(hazards)
    assert lanes is not None and lanes.family == family and lanes.ratio
    with np.errstate(**KERNEL_ERRSTATE):
        t, lost = lanes.times(codes, x, e)
    assert lost.any()  # the extreme ratios do lose lanes
    t[lost] = _own(hazards, codes[lost], x[lost], e[lost])
    np.testing.assert_array_equal(t, _own(hazards, codes, x, e))


def test_ratios_on_one_shared_base_of_any_family():
    base = AtLeastHazard(GompertzMakeham(1e-4, 0.08, 0.002), Exponential(0.01), 40.0)  # a floor: no per-lane kernel
    hazards = [base.scaled(hr) for hr in (0.5, 0.8, 2.0)] + [base]
    x, e, codes = _lanes(500, len(hazards), seed=3)
    lanes = LaneHazards.of(hazards)
    assert lanes.family == "shared"
    with np.errstate(**KERNEL_ERRSTATE):
        t, lost = lanes.times(codes, x, e)
    t[lost] = _own(hazards, codes[lost], x[lost], e[lost])
    np.testing.assert_array_equal(t, _own(hazards, codes, x, e))


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_a_lane_alone_equals_the_same_lane_among_others(family):
    # late clocks with small draws: Newton polishing; gamma at z = x / scale of 600-1e5: its far tail
    # (H > 650: bracketed Newton on log Q) and the continued fraction for Q < 1e-280; clocks at 0
    # among others (the Weibull's shortcut when every clock is 0 gives the general form's bits);
    # draws of 0, 1e15 and +inf (the Gompertz short form and the log-normal's Newton step for
    # H > 3000 are chosen lane by lane). Every lane stops and chooses on its own, so its bits do not
    # depend on the lanes that share the call.
    hazards = FAMILIES[family]
    rng = np.random.default_rng(11)
    n = 160
    x = np.concatenate([rng.uniform(1.0, 60.0, n // 4), 10.0 ** rng.uniform(2.7, 5.0, n // 4),
                        rng.exponential(5.0, n // 4), np.zeros(n - 3 * (n // 4))])
    e = np.where(rng.random(n) < 0.5, 10.0 ** rng.uniform(-12, -3, n), rng.exponential(1.0, n))
    e[::37], e[5::41], e[3::43] = 0.0, np.inf, 1e15
    codes = rng.integers(0, len(hazards), n)
    with np.errstate(**KERNEL_ERRSTATE):
        together, _ = LaneHazards.of(hazards).times(codes, x, e)
        alone = np.array([LaneHazards.of(hazards).times(codes[i:i + 1], x[i:i + 1], e[i:i + 1])[0][0]
                          for i in range(n)])
    np.testing.assert_array_equal(together, alone)


@pytest.mark.parametrize("family", sorted(FAMILIES))
def test_per_lane_times_solve_the_left_truncated_equation(family):
    # H(x + T) - H(x) = e in 40-digit arithmetic (mpmath, the closed forms of each family), within
    # the rounding the conditioning allows (tests/sim/test_hazard_edges.check, K = 64): per-lane
    # numbers and ratios, clocks 0-30, draws from a standard exponential
    bases = FAMILIES[family]
    hazards = [b.scaled(hr) for b, hr in zip(bases, (1.0, 0.7, 1.8, 1.2, 0.3))]
    rng = np.random.default_rng(2)
    n = 60
    x, e = np.where(rng.random(n) < 0.2, 0.0, rng.uniform(0.0, 30.0, n)), rng.exponential(1.0, n)
    codes = rng.integers(0, len(hazards), n)
    with np.errstate(**KERNEL_ERRSTATE):
        t, lost = LaneHazards.of(hazards).times(codes, x, e)
    assert not lost.any()
    bad = [(i, why) for i in range(n) if (why := check(hazards[codes[i]], float(x[i]), float(e[i]), float(t[i])))]
    assert not bad


@pytest.mark.parametrize("family", ["gompertz", "gompertz_makeham"])
def test_gompertz_slopes_of_every_sign_in_one_call_solve_the_equation(family):
    # every Gompertz(-Makeham) of FAMILIES in one call (slopes < 0, 0 and > 0, subnormal slopes and
    # constants, rates from 1e-300 to 1e300): H(x + T) - H(x) = e in 40-digit arithmetic (mpmath),
    # T = +inf only where e reaches the hazard left (improper g < 0 with c = 0); clocks 0-100, draws
    # from a standard exponential and a few tiny and huge ones (c, B and e all tiny: a Makeham whose
    # Gompertz term dominates once took its bracket from a Gompertz time of the unscaled B)
    hazards = FAMILIES[family]
    rng = np.random.default_rng(5)
    n = 80
    x = np.where(rng.random(n) < 0.2, 0.0, rng.uniform(0.0, 100.0, n))
    e = rng.exponential(1.0, n)
    e[::11], e[3::13] = 1e-200, 1e200
    e[5::7] = 1e-246  # with the Makeham's tiny rates and constants: c, B and e all below 2^-800, rescaled
    codes = np.arange(n) % len(hazards)
    with np.errstate(**KERNEL_ERRSTATE):
        t, lost = LaneHazards.of(hazards).times(codes, x, e)
    assert lost is None
    if family == "gompertz":  # the improper hazards do give some lanes no event
        assert np.isinf(t[np.array([h.shape < 0.0 for h in hazards])[codes]]).any()
    bad = [(i, why) for i in range(n) if (why := check(hazards[codes[i]], float(x[i]), float(e[i]), float(t[i])))]
    assert not bad


def test_makeham_lanes_with_subnormal_slopes_and_the_largest_draws():
    # slopes of +-5e-324 with draws near the largest double, alone and under ratios whose e / hr
    # overflows: the Halley bracket's lower end once overflowed (NaN times) and the large-ratio
    # form's check multiplied 0 by inf (a RuntimeWarning, an error here); T against 40-digit mpmath
    hazards = [GompertzMakeham(0.9, 5e-324, 0.15), GompertzMakeham(0.9, -5e-324, 0.15),
               GompertzMakeham(3.0, 5e-324, 0.5).scaled(0.3), GompertzMakeham(3.0, 5e-324, 0.0).scaled(1e-310)]
    x, e = np.array([0.0, 53.0, 0.0, 20.0]), np.array([0.6, 1.7e308, 1.7e308, 1e308])
    for h in hazards:
        t = h.conditional_time(x, e)
        assert not np.isnan(t).any()
        assert not [why for xi, ei, ti in zip(x, e, t) if (why := check(h, float(xi), float(ei), float(ti)))]
    with np.errstate(**KERNEL_ERRSTATE):  # the per-lane call of the bases, each lane its own hazard's bits
        codes = np.repeat(np.arange(3), x.size)
        xs, es = np.tile(x, 3), np.tile(e, 3)
        bases = hazards[:2] + [hazards[2].base]
        t, lost = LaneHazards.of(bases).times(codes, xs, es)
    assert lost is None
    np.testing.assert_array_equal(t, _own(bases, codes, xs, es))


def test_per_lane_band_rates_solve_the_piecewise_closed_form():
    # H(t) = sum of rate x time in each band up to t (the life-table form, common practice, no source)
    breaks = (0.0, 1.0, 5.0, 20.0)
    hazards = [PiecewiseConstant(breaks, r) for r in ((0.1, 0.0, 0.3, 2.0), (0.5, 0.2, 0.1, 0.05), (2.0, 0.0, 0.0, 1.0))]
    rng = np.random.default_rng(4)
    n = 300
    x, e = rng.uniform(0.0, 25.0, n), rng.exponential(1.0, n)
    codes = rng.integers(0, len(hazards), n)
    with np.errstate(**KERNEL_ERRSTATE):
        t, _ = LaneHazards.of(hazards).times(codes, x, e)

    def cum(rates, s):
        ends = breaks[1:] + (math.inf,)
        return math.fsum(r * (min(s, b1) - b0) for r, b0, b1 in zip(rates, breaks, ends) if s > b0 and r > 0)

    for i in range(n):
        rates = hazards[codes[i]].rates
        spent = cum(rates, x[i] + t[i]) - cum(rates, x[i])
        assert abs(spent - e[i]) <= K * EPS * (cum(rates, x[i] + t[i]) + e[i]), i


def test_the_band_search_per_row_equals_searchsorted():
    rng = np.random.default_rng(9)
    rows = [np.array([0.0, 0.0, 0.0, 1.0, 1.0, 3.0, np.inf, np.inf]),
            np.concatenate([[0.0], np.cumsum(rng.exponential(1.0, 7))]),
            np.array([0.0, 1e308, np.inf, np.inf, np.inf, np.inf, np.inf, np.inf]),
            np.zeros(8)]
    table = np.stack(rows)
    y = np.concatenate([rng.uniform(-1.0, 10.0, 200), [0.0, 1.0, 3.0, np.inf, np.nan, -np.inf, 1e308]])
    row = rng.integers(0, len(rows), y.size)
    want = np.array([np.searchsorted(table[r], v, side="right") for r, v in zip(row, y)])
    np.testing.assert_array_equal(_search_right(table, row, y), want)


@pytest.mark.parametrize("hazards", [
    [Gompertz(1e-4, 0.08), GompertzMakeham(1e-4, 0.08, 0.001)],  # two families (although c = 0 is Gompertz)
    [PiecewiseConstant((0.0, 1.0), (0.1, 0.2)), PiecewiseConstant((0.0, 2.0), (0.1, 0.2))],  # band starts
    [Weibull(1.2, 3.0), LogLogistic(1.2, 3.0)],  # two families
    [Weibull(1.2, 3.0).scaled(0.5), LogNormal(1.0, 0.5).scaled(0.5)],  # two families under ratios
], ids=["gompertz-and-makeham", "piecewise-breaks", "mixed", "mixed-ratios"])
def test_hazards_without_a_shared_kernel_are_refused(hazards):
    assert LaneHazards.of(hazards) is None

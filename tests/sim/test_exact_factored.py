"""The life-table background factored out of the forward equations (sim.reference.factored, issue 12
item 13): when it applies, the flows of every exit (background deaths included) against products of
scipy.linalg.expm over the table's bands, and agreement with the solve that restarts at the band
edges where both apply (entry at a singular hazard, several strategies, costs)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import linalg

import sim.reference.exact as exact_module
from sim.io.scenario.reader import parse_scenario
from sim.reference import exact_outcomes_and_occupancy, solve_stacked
from sim.reference.factored import background_target
from sim.reference.forward import ExitRates

from .test_exact_life_table import DISCOUNT, NORMAL, SCENARIOS, TABLE, _band_rates, _generator, _scenario

RATES = {"onset": 0.1, "recovery": 0.3, "disease death": 0.05}


def _flows_reference(a0: float, mu: np.ndarray, horizon: float, delta: float) -> dict[tuple[str, int], float]:
    """Expected discounted number of moves through each exit (name, source state) over [0, horizon]
    for entry age a0: per band of attained age (constant intensities), the integral of
    exp(-delta t) p(t) by Van Loan's block exponential (Van Loan 1978, IEEE Trans Autom Control
    23(3):395-404), times the exit's rate."""
    edges = np.arange(np.floor(a0) + 1, a0 + horizon) - a0
    cuts = np.concatenate(([0.0], edges, [horizon]))
    p = np.array([1.0, 0.0, 0.0])
    out = {("onset", 0): 0.0, ("recovery", 1): 0.0, ("disease death", 1): 0.0,
           ("background death", 0): 0.0, ("background death", 1): 0.0}
    for lo, hi in zip(cuts[:-1], cuts[1:]):
        m_b = mu[int(np.floor(a0 + 0.5 * (lo + hi)))]
        q = _generator(RATES["onset"], m_b)
        block = np.zeros((6, 6))
        block[:3, :3] = q - delta * np.eye(3)
        block[:3, 3:] = np.eye(3)
        years = np.exp(-delta * lo) * (p @ linalg.expm(block * (hi - lo))[:3, 3:])
        out["onset", 0] += RATES["onset"] * years[0]
        out["recovery", 1] += RATES["recovery"] * years[1]
        out["disease death", 1] += RATES["disease death"] * years[1]
        out["background death", 0] += m_b * years[0]
        out["background death", 1] += m_b * years[1]
        p = p @ linalg.expm(q * (hi - lo))
    return out


def test_flows_of_every_exit_match_matrix_exponentials():
    # Per (entry age, sex): the flows the factored solve derives (disease exits from the reduced
    # system's flows, background deaths from its time-in-state integrals, both weighted by the
    # background survival) against the band-by-band reference, undiscounted and discounted.
    model = _scenario('family = "exponential"\nrate = 0.1').model
    age = np.array([47.3, 62.75, 47.3, 62.75])
    sex = np.array([0, 0, 1, 1])
    horizon = 100.0 - age
    sol = solve_stacked(model, "base", age, sex, np.array([0.0]), horizon, (0.0, DISCOUNT))
    exits = [e for per in model.resolve("base") for e in per]
    mu = _band_rates()
    for r in range(age.size):
        for j, delta in enumerate((0.0, np.log1p(DISCOUNT))):
            ref = _flows_reference(age[r], mu[("female", "male")[sex[r]]], horizon[r], delta)
            got = {(e.name, e.source): sol.flows[j, r, k] for k, e in enumerate(exits)}
            assert set(got) == set(ref)
            for key, value in ref.items():
                assert got[key] == pytest.approx(value, rel=1e-11), (r, delta, key)


def _unfactored(monkeypatch):
    monkeypatch.setattr(exact_module, "background_target", lambda *args: None)


@pytest.mark.parametrize("onset", ['family = "weibull"\nshape = 1.3\nscale = 30.0',
                                   'family = "weibull"\nshape = 0.7\nscale = 30.0'],
                         ids=["smooth at entry", "infinite at entry"])
def test_factored_solve_agrees_with_the_restarted_one(monkeypatch, onset):
    # Two strategies (a hazard ratio on onset), 48 entry ages of a normal distribution, costs on
    # background death and on the states: every outcome and the occupancy curve agree with the solve
    # that restarts at each band edge (itself checked against scipy in test_exact_life_table.py).
    # Shape 0.7: a hazard infinite at entry, stepped over [0, t0] before the ODE (sim.reference.exact).
    strategies = """
[[strategies]]
name = "usual care"
[[strategies]]
name = "new therapy"
hazard_ratios = { onset = 0.7 }
state_costs = { healthy = 1100.0, sick = 1100.0 }
"""
    costs = ('utilities = { healthy = 0.86, sick = 0.58 }\nstate_costs = { healthy = 300.0, sick = 7200.0 }\n'
             'transition_costs = { onset = 1500.0, "disease death" = 9000.0, "background death" = 500.0 }\n')
    model = _scenario(onset, NORMAL, extra=costs + strategies).model  # (strategies follow the valuation keys)
    times = np.linspace(0.0, 60.0, 25)
    new_values, new_occ = exact_outcomes_and_occupancy(model, times)
    _unfactored(monkeypatch)
    old_values, old_occ = exact_outcomes_and_occupancy(model, times)
    np.testing.assert_allclose(new_values["value"].to_numpy(), old_values["value"].to_numpy(), rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(new_occ["probability"].to_numpy(), old_occ["probability"].to_numpy(), rtol=0,
                               atol=1e-10)


def test_which_models_are_factored():
    # The life table from every living state into the only absorbing state: factored. A second
    # absorbing state, or a smooth (Gompertz) background: not (nothing to gain, or not valid).
    def target(model):
        exits = [e for per in model.resolve(model.strategy_names[0]) for e in per]
        m = 2
        groups = lambda e: tuple((h, np.arange(m)) for h in e.hazards[:1])  # noqa: E731
        rates = [ExitRates(e.source, e.target, groups(e), np.full(m, 50.0) if e.clock.value == "age" else np.zeros(m),
                           e.clock.value != "state") for e in exits]
        return background_target(rates, [e.is_background for e in exits],
                                 np.array([s.absorbing for s in model.states]))

    assert target(_scenario('family = "exponential"\nrate = 0.1').model) == 2
    assert target(_scenario('family = "exponential"\nrate = 0.1', disease_death_to="dead of disease").model) is None
    gompertz = parse_scenario((SCENARIOS / "lanthic_syndrome.toml").read_text(encoding="utf-8"),
                              base_dir=SCENARIOS).model
    assert target(gompertz) is None
    assert TABLE.exists()


def test_factored_solve_needs_no_restart(monkeypatch):
    # 48 entry ages and a life table with one-year bands: the reduced system has no jump, so the ODE
    # solver runs in one segment from entry to the last horizon (a count, not a timing).
    from sim.reference import forward, solve_exact

    model = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0', NORMAL).model
    segments = []
    real = forward._solve_segment

    def counting(seg, *args):
        segments.append((seg.lo, seg.hi))
        return real(seg, *args)

    monkeypatch.setattr(forward, "_solve_segment", counting)
    solve_exact(model, [1.0], strategies=("base",))
    assert len(segments) == 1 and segments[0][0] == 0.0 and segments[0][1] == pytest.approx(60.0, abs=0.5)


def test_a_transition_floored_at_a_life_table_is_not_factored():
    # max(h_fit, life table) jumps at the table's band edges too: that model keeps the restarts, and
    # its exact solution still matches a quadrature of the survival (one living state, closed form
    # exp(-integral of (max(h_fit, mu) + mu)); Beyersmann et al. 2009, Stat Med 28:956-971).
    from scipy import integrate

    from sim.hazards import Gompertz, PiecewiseConstant
    from sim.model import BackgroundMortality, Clock, FixedAge, Horizon, Model, Population, State, Transition
    from sim.reference import solve_exact

    table = PiecewiseConstant(breaks=tuple(float(a) for a in range(0, 111)),
                              rates=tuple(3e-5 * np.exp(0.085 * a) for a in range(0, 111)))
    fit = Gompertz(rate=0.004, shape=0.03)
    model = Model(
        states=(State("alive"), State("dead", absorbing=True)),
        transitions=(Transition("disease death", "alive", "dead", fit, Clock.AGE, at_least_background=True),),
        background=BackgroundMortality("dead", {"all": table}, Clock.AGE),
        population=Population(FixedAge(60.3), "alive", {"all": 1.0}),
        horizon=Horizon(30.0, "time"))
    exits = [e for per in model.resolve("base") for e in per]
    rates = [ExitRates(e.source, e.target, tuple((h, np.arange(1)) for h in e.hazards), np.full(1, 60.3),
                       True) for e in exits]
    assert background_target(rates, [e.is_background for e in exits], np.array([False, True])) is None
    occ = solve_exact(model, [10.0, 30.0]).occupancy
    alive = occ[occ["state"] == "alive"]["probability"].to_numpy()
    edges = np.arange(61, 91) - 60.3

    def cumulative(t):
        pieces = np.concatenate(([0.0], edges[edges < t], [t]))
        rate = lambda s: max(fit.hazard(np.array([60.3 + s]))[0], table.hazard(np.array([60.3 + s]))[0]) \
            + table.hazard(np.array([60.3 + s]))[0]  # noqa: E731
        return sum(integrate.quad(rate, a, b, epsabs=1e-14, epsrel=1e-13)[0] for a, b in zip(pieces[:-1], pieces[1:]))

    np.testing.assert_allclose(alive, [np.exp(-cumulative(10.0)), np.exp(-cumulative(30.0))], rtol=1e-9, atol=1e-11)

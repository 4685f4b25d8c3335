"""Exact solution with a life-table background (issue 12 items 13 and 14): piecewise integration
between the table's band edges, checked against products of scipy.linalg.expm (everything piecewise
constant) and against an independent tight-tolerance scipy.integrate.solve_ivp per entry age; and a
cancel request honoured during the solve."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, linalg

from sim.engine import SimulationCancelled
from sim.io.scenario.reader import parse_scenario
from sim.pipeline import run_scenario
from sim.reference import exact_outcomes_and_occupancy, solve_exact
from sim.reference import forward

SCENARIOS = Path(__file__).resolve().parents[2] / "scenarios"
TABLE = SCENARIOS / "tables" / "synthetic_life_table.csv"
ENTRY_AGES = (47.3, 62.75)
ENTRY_WEIGHTS = (0.4, 0.6)
DISCOUNT = 0.035


EMPIRICAL = f'{{ distribution = "empirical", ages = {list(ENTRY_AGES)}, weights = {list(ENTRY_WEIGHTS)} }}'
NORMAL = '{ distribution = "normal", mean = 55.0, sd = 8.0, low = 40.0, high = 75.0 }'


def _scenario(onset: str, entry_age: str = EMPIRICAL, disease_death_to: str = "dead", extra: str = ""):
    """Illness-death with recovery and the bundled (invented) life table as background mortality;
    disease death into "dead" (the background's target) or into a fourth, absorbing state."""
    fourth = "" if disease_death_to == "dead" else f'[[states]]\nname = "{disease_death_to}"\nabsorbing = true\n'
    text = f"""
format_version = 1
name = "life-table test (invented)"
[[states]]
name = "healthy"
[[states]]
name = "sick"
[[states]]
name = "dead"
absorbing = true
{fourth}[[transitions]]
name = "onset"
from = "healthy"
to = "sick"
clock = "entry"
{onset}
[[transitions]]
name = "recovery"
from = "sick"
to = "healthy"
clock = "state"
family = "exponential"
rate = 0.3
[[transitions]]
name = "disease death"
from = "sick"
to = "{disease_death_to}"
clock = "state"
family = "exponential"
rate = 0.05
[background]
to = "dead"
clock = "age"
[background.life_table]
file = "{TABLE.as_posix()}"
kind = "q"
columns = {{ female = "q_female", male = "q_male" }}
[population]
initial_state = "healthy"
sex_mix = {{ female = 0.5, male = 0.5 }}
entry_age = {entry_age}
[horizon]
value = 100
scale = "age"
[valuation]
discount_costs = {DISCOUNT}
discount_effects = {DISCOUNT}
{extra}
"""
    return parse_scenario(text, base_dir=SCENARIOS)


def _band_rates() -> dict[str, np.ndarray]:
    """Band rates by sex straight from the CSV: -ln(1 - q) over one-year bands (constant force), to
    age 100 (the horizon; the table's last row has q = 1)."""
    table = pd.read_csv(TABLE).iloc[:101]
    assert np.array_equal(table["age"].to_numpy(), np.arange(101))
    return {sex: -np.log1p(-table[f"q_{sex}"].to_numpy()) for sex in ("female", "male")}


def _generator(onset: float, background: float, split: bool = False) -> np.ndarray:
    """States healthy, sick, dead (and, with ``split``, dead of disease)."""
    if not split:
        return np.array([[-(onset + background), onset, background],
                         [0.3, -(0.3 + 0.05 + background), 0.05 + background],
                         [0.0, 0.0, 0.0]])
    return np.array([[-(onset + background), onset, background, 0.0],
                     [0.3, -(0.3 + 0.05 + background), background, 0.05],
                     [0.0, 0.0, 0.0, 0.0], [0.0, 0.0, 0.0, 0.0]])


def _expm_reference(a0: float, mu: np.ndarray, times: np.ndarray, horizon: float, delta: float, split: bool = False):
    """Occupancy at ``times`` and (undiscounted, discounted) time in state to ``horizon`` as products of
    matrix exponentials over the bands of attained age, the integrals by Van Loan's block exponential
    (Van Loan 1978, IEEE Trans Autom Control 23(3):395-404)."""
    edges = np.arange(np.floor(a0) + 1, a0 + max(horizon, times.max()) + 1) - a0
    cuts = np.unique(np.concatenate(([0.0], edges, times, [horizon])))
    cuts = cuts[cuts <= max(horizon, times.max())]
    n = 4 if split else 3
    p = np.eye(n)[0]
    occ, years, disc_years = {0.0: p}, np.zeros(n), np.zeros(n)
    for lo, hi in zip(cuts[:-1], cuts[1:]):
        q = _generator(0.1, mu[int(np.floor(a0 + 0.5 * (lo + hi)))], split)
        if hi <= horizon:
            for rate, acc in ((0.0, years), (delta, disc_years)):
                block = np.zeros((2 * n, 2 * n))
                block[:n, :n] = q - rate * np.eye(n)
                block[:n, n:] = np.eye(n)
                acc += np.exp(-rate * lo) * (p @ linalg.expm(block * (hi - lo))[:n, n:])
        p = p @ linalg.expm(q * (hi - lo))
        occ[float(hi)] = p
    return np.array([occ[float(t)] for t in times]), years, disc_years


@pytest.mark.parametrize("split", [False, True], ids=["background factored out", "restarts at band edges"])
def test_life_table_background_matches_products_of_matrix_exponentials(split):
    # Constant transition hazards and a life-table background: piecewise-constant intensities, so the
    # exact occupancy is a product of matrix exponentials over the bands (docs/methods.md, 'Exact
    # solution'; scipy.linalg.expm the independent reference). Band edges fall at different times
    # since entry for the two entry ages. With disease death into the background's target the life
    # table is factored out of the ODE (sim.reference.factored); with a second absorbing state it is
    # not, and the solver restarts at its band edges (sim.reference.forward).
    states = ["healthy", "sick", "dead"] + (["dead of disease"] if split else [])
    model = _scenario('family = "exponential"\nrate = 0.1', disease_death_to=states[-1] if split else "dead").model
    times = np.array([0.0, 0.4, 1.0, 2.5, 10.0, 20.0, 30.0])
    delta = np.log1p(DISCOUNT)
    sol = solve_exact(model, times, discount_rate=DISCOUNT)
    mu = _band_rates()
    n = len(states)
    occ_ref, yrs_ref, dyrs_ref = np.zeros((times.size, n)), np.zeros(n), np.zeros(n)
    for a0, w in zip(ENTRY_AGES, ENTRY_WEIGHTS):
        for sex in ("female", "male"):
            occ, yrs, dyrs = _expm_reference(a0, mu[sex], times, 100.0 - a0, delta, split)
            occ_ref += 0.5 * w * occ
            yrs_ref += 0.5 * w * yrs
            dyrs_ref += 0.5 * w * dyrs
    got = sol.occupancy.pivot(index="time", columns="state", values="probability")[states]
    # the first solver (adaptive steps across every band edge) was off by 6e-9 in occupancy and 7e-9
    # relative in time in state here; restarting at each edge gives 5e-13 and 1e-15 (1e-12 with a
    # second absorbing state); the factored solve 4e-13 and 7e-16
    occ_tol, tis_tol = (1e-11, 1e-11) if split else (1e-12, 1e-13)
    np.testing.assert_allclose(got.to_numpy(), occ_ref, rtol=0, atol=occ_tol)
    tis = sol.time_in_state.set_index("state").loc[states]
    np.testing.assert_allclose(tis["years"].to_numpy(), yrs_ref, rtol=tis_tol)
    np.testing.assert_allclose(tis["discounted_years"].to_numpy(), dyrs_ref, rtol=tis_tol)


def _weibull_reference(a0: float, mu: np.ndarray, horizon: float, shape: float, scale: float) -> np.ndarray:
    """Time in each state to ``horizon`` with a Weibull onset on time since entry: scipy's DOP853 at
    rtol 1e-12, restarted at each band edge of this entry age (written here, independent of
    sim.reference.forward)."""
    def rhs(t, y, m):
        h = shape / scale * (t / scale) ** (shape - 1.0) if t > 0 else 0.0
        q = _generator(h, m)
        return np.concatenate([y[:3] @ q, y[:3]])

    edges = np.arange(np.floor(a0) + 1, a0 + horizon) - a0
    cuts = np.concatenate(([0.0], edges, [horizon]))
    y = np.array([1.0, 0.0, 0.0, 0.0, 0.0, 0.0])
    for lo, hi in zip(cuts[:-1], cuts[1:]):
        m = mu[int(np.floor(a0 + 0.5 * (lo + hi)))]
        y = integrate.solve_ivp(rhs, (lo, hi), y, method="DOP853", rtol=1e-12, atol=1e-14, args=(m,)).y[:, -1]
    return y[3:]


def test_weibull_onset_with_life_table_matches_tight_reference():
    # The demo's shape: an onset hazard singular at entry (Weibull shape 1.3 on time since entry) with
    # a life-table background; the solver integrates the first START_PHASE years on time since entry
    # and the rest on attained age. Reference: a tighter solve per entry age on time since entry.
    # The life table is factored out of the ODE (one segment, no restarts); the solve before that
    # (restarts at every band edge) was within 1.5e-11 of the reference, the factored one 1e-14.
    model = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0').model
    years = solve_exact(model, [1.0]).time_in_state.set_index("state")["years"]
    mu = _band_rates()
    ref = sum(0.5 * w * _weibull_reference(a0, mu[sex], 100.0 - a0, 1.3, 30.0)
              for a0, w in zip(ENTRY_AGES, ENTRY_WEIGHTS) for sex in ("female", "male"))
    np.testing.assert_allclose(years[["healthy", "sick", "dead"]].to_numpy(), ref, rtol=1e-12)


def test_life_table_solve_restarts_at_shared_band_edges(monkeypatch):
    # A life table on attained age with 48 entry ages (Gauss-Legendre nodes of a normal distribution
    # on 40-75): on attained age the band edges are shared, and each entry age joins the age axis at a
    # band edge, so the age axis restarts at the band edges crossed (41 to 99) and nowhere else (not
    # at the entry ages, nor past the horizon at age 100); on time since entry only the first
    # START_PHASE years of each entry age add restarts (a count of the solver's restarts, not a
    # timing: speed belongs in benchmarks/).
    # (disease death into a state of its own: the background is not factored out of the ODE)
    model = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0', NORMAL, disease_death_to="dead of disease").model
    segments = []
    real = forward._solve_segment

    def counting(seg, *args):
        segments.append((seg.lo, seg.hi))
        return real(seg, *args)

    monkeypatch.setattr(forward, "_solve_segment", counting)
    solve_exact(model, [1.0], strategies=("base",))
    on_time = [s for s in segments if s[0] < forward.START_PHASE]  # time since entry, all ages at once
    on_age = [s for s in segments if s[0] >= 40.0]
    assert len(on_time) + len(on_age) == len(segments)
    assert on_time[-1][1] <= forward.START_PHASE + 1.0  # to each age's first band edge after START_PHASE
    assert len(on_time) <= 48 * int(np.ceil(forward.START_PHASE)) + 1
    assert on_age == [(float(a), float(a + 1)) for a in range(41, 100)]


class CancelAfter:
    """A cancel token that turns true at its ``after``-th check (deterministic: counts checks, not time)."""

    def __init__(self, after: int) -> None:
        self.after, self.checks = after, 0

    def is_set(self) -> bool:
        self.checks += 1
        return self.checks >= self.after


def test_cancel_stops_the_exact_solve_at_the_next_check():
    # The solve checks the token at every segment start and every CANCEL_EVERY right-hand-side
    # evaluations, so at most CANCEL_EVERY evaluations pass between a request and the stop.
    model = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0').model
    token = CancelAfter(after=40)
    with pytest.raises(SimulationCancelled):
        exact_outcomes_and_occupancy(model, np.linspace(0.0, 50.0, 11), cancel=token)
    assert token.checks == 40  # stopped at the first check that saw the request
    never = CancelAfter(after=10**9)
    exact_outcomes_and_occupancy(model, np.linspace(0.0, 50.0, 11), cancel=never)
    assert never.checks > 40  # the solve does check during the integration, many times


def test_cancel_during_the_exact_stage_of_a_run():
    # The pipeline passes its cancel token into the exact stage: the token turns true a few checks
    # after the stage starts, and the run stops there (not after the whole solve).
    scenario = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0')
    stage = {"exact": False, "checks": 0}

    def progress(label, done, total):
        if label == "exact solution":
            stage["exact"] = True

    def cancel() -> bool:
        if stage["exact"]:
            stage["checks"] += 1
        return stage["checks"] >= 5

    with pytest.raises(SimulationCancelled, match="exact solution cancelled"):
        run_scenario(scenario, patients=200, seed=1, workers=1, study=False, progress=progress, cancel=cancel)
    assert stage["checks"] == 5


def test_solve_to_horizon_only_matches_the_full_solve():
    # exact_outcomes_and_occupancy and solve_exact integrate each (entry age, sex) pair only to its own
    # horizon (to_horizon=True): the values they read (up to the horizon) are those of the full solve,
    # to rounding (the segments differ); past the horizon the occupancy is NaN, never a stale value.
    from sim.reference import solve_stacked

    model = _scenario('family = "weibull"\nshape = 1.3\nscale = 30.0').model
    age, sex = np.array([47.3, 62.75, 71.5]), np.array([0, 1, 0])
    horizon = 100.0 - age
    times = np.array([0.0, 0.3, 5.0, 28.5, 37.5, 52.7, 60.0])
    full = solve_stacked(model, "base", age, sex, times, horizon, (0.0, DISCOUNT))
    own = solve_stacked(model, "base", age, sex, times, horizon, (0.0, DISCOUNT), to_horizon=True)
    within = times[None, :] <= horizon[:, None]
    np.testing.assert_allclose(own.occupancy[within], full.occupancy[within], rtol=0, atol=1e-12)
    assert np.isnan(own.occupancy[~within]).all()
    np.testing.assert_allclose(own.integrals, full.integrals, rtol=1e-12)
    np.testing.assert_allclose(own.flows, full.flows, rtol=1e-12)

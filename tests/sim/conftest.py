"""Shared models for the engine and exact-solution tests."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest

from sim.hazards import Exponential, Gompertz, Weibull
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.model.population import FixedAge, NormalAge, Population

FULL = os.environ.get("HAZARDTRACE_FULL") == "1"


def illness_death(horizon: Horizon = Horizon(30.0, "time"), entry_age=None, strategies=()) -> Model:
    """Illness-death with recovery: Weibull onset on time since entry, constant recovery and disease
    death on time in state, Gompertz background death by sex on attained age (invented numbers)."""
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "healthy", "sick", Weibull(shape=1.3, scale=30.0), Clock.ENTRY),
            Transition("recovery", "sick", "healthy", Exponential(rate=0.15), Clock.STATE),
            Transition("disease death", "sick", "dead", Exponential(rate=0.08), Clock.STATE),
        ),
        background=BackgroundMortality(
            "dead", {"female": Gompertz(rate=3e-5, shape=0.085), "male": Gompertz(rate=5e-5, shape=0.09)},
            Clock.AGE),
        population=Population(entry_age or NormalAge(55.0, 8.0, 40.0, 75.0), "healthy",
                              {"female": 0.45, "male": 0.55}),
        horizon=horizon,
        strategies=strategies,
    )


def single_exit(hazard, clock=Clock.ENTRY, age: float = 50.0, horizon: float = 40.0) -> Model:
    """Alive -> dead with one hazard, everyone entering at ``age``."""
    return Model(
        states=(State("alive"), State("dead", absorbing=True)),
        transitions=(Transition("death", "alive", "dead", hazard, clock),),
        population=Population(FixedAge(age), "alive"),
        horizon=Horizon(horizon, "time"),
    )


def two_state_text(death_keys: str) -> str:
    """Scenario text of the alive -> dead model (everyone entering alive at 50, 10 years), the death
    transition's hazard keys given as ``death_keys``; without ``format_version`` and strategies, for
    the caller to put around it."""
    return f"""[[states]]
name = "alive"
[[states]]
name = "dead"
absorbing = true
[[transitions]]
name = "death"
from = "alive"
to = "dead"
{death_keys}
[population]
initial_state = "alive"
entry_age = {{ distribution = "fixed", age = 50 }}
[horizon]
value = 10
"""


def occupancy_from_log(events: pd.DataFrame, patients: pd.DataFrame, states, t: float) -> np.ndarray:
    """Share of patients in each state at time ``t`` (everyone followed to ``t``), read directly from
    the event log: the target of each patient's last move at or before ``t``, else the initial state."""
    n = len(patients)
    state = pd.Series(patients["initial_state"].astype(str).to_numpy(), index=patients["patient"].to_numpy())
    ev = events[events["time"] <= t]
    last = ev.groupby("patient", sort=False)["to_state"].last().astype(str)
    state.loc[last.index] = last.to_numpy()
    counts = state.value_counts()
    return np.array([counts.get(s, 0) for s in states], dtype=float) / n


def simulate_within_4_mcse(model: Model, n: int, seed: int, times: np.ndarray):
    """Simulate ``n`` patients of ``model`` and check that the share in every state at each of ``times``
    is within 4 binomial Monte Carlo standard errors, 4 sqrt(p (1 - p) / n), of the exact solver's
    probability p; returns the run for further checks."""
    from sim.engine import simulate
    from sim.reference.exact import solve_exact

    exact = solve_exact(model, times).occupancy.pivot(index="time", columns="state", values="probability")
    run = simulate(model, n, seed=seed)
    for t in times:
        p_hat = occupancy_from_log(run.events, run.patients, model.state_names, t)
        p = exact.loc[t, list(model.state_names)].to_numpy()
        assert np.all(np.abs(p_hat - p) <= 4 * np.sqrt(p * (1 - p) / n)), (t, p_hat, p)
    return run


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


@pytest.fixture(scope="session")
def lanthic():
    """The bundled (invented) lanthic demo scenario."""
    from sim.io import demo_scenario

    return demo_scenario("lanthic")


@pytest.fixture(scope="session")
def loopback_scheduler():
    """Address of a Dask cluster of two worker processes on the loopback interface, started once for
    the session and closed after it (the distributed run tests share it)."""
    import logging

    from dask.distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None,
                      worker_dashboard_address=None, silence_logs=logging.ERROR,
                      scheduler_kwargs={"dashboard_address": ":0"}) as cluster:  # keep 8787 free for others
        yield cluster.scheduler_address

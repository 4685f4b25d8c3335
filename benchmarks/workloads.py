"""Models and measurements shared by the benchmark suite (run by hand, not by the test suite).

All numbers in these models are invented for benchmarking; they describe no real disease.
"""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sim.hazards import Exponential, Gompertz, Weibull
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.model.population import FixedAge, Population, UniformAge

__all__ = ["REFERENCE", "reference_model", "chain_model", "latent_draws", "Survival", "survival_of",
           "SURVIVAL_TIMES"]

#: Invented parameters of the reference workload (illness-death).
REFERENCE = {
    "entry_age": (40.0, 70.0),  # uniform
    "gompertz_slope": 0.09,  # per year, background death on attained age
    "gompertz_hazard_at_40": 0.001,  # per year
    "onset_weibull": (1.3, 25.0),  # shape, scale in years, on time since entry
    "disease_death": 0.15,  # per year, on time in state (constant)
    "recovery": 0.05,  # per year, on time in state (constant)
    "horizon": 60.0,  # years since entry
}

#: Times (years since entry) at which survival is compared.
SURVIVAL_TIMES = (10.0, 20.0, 40.0)


def reference_model(package: str = "sim") -> Model:
    """Illness-death: healthy -> sick (Weibull on time since entry), sick -> healthy and sick -> dead
    (exponential on time in state), background death from every living state (Gompertz on attained
    age: h(a) = b exp(g a) with g = 0.09/year and h(40) = 0.001/year, so b = 0.001 exp(-0.09 * 40)).
    Entry age uniform on [40, 70], 60-year horizon. Invented numbers. ``package``: build it from
    another copy of the package (e.g. ``"sim_old"`` for comparisons in one process)."""
    if package != "sim":
        hz = importlib.import_module(f"{package}.hazards")
        ms = importlib.import_module(f"{package}.model.multistate")
        pop = importlib.import_module(f"{package}.model.population")
        Exponential, Gompertz, Weibull = hz.Exponential, hz.Gompertz, hz.Weibull  # noqa: N806
        BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition = (  # noqa: N806
            ms.BackgroundMortality, ms.Clock, ms.Horizon, ms.Model, ms.State, ms.Strategy, ms.Transition)
        Population, UniformAge = pop.Population, pop.UniformAge  # noqa: N806
    else:
        from sim.hazards import Exponential, Gompertz, Weibull
        from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
        from sim.model.population import Population, UniformAge
    p = REFERENCE
    g = p["gompertz_slope"]
    b = p["gompertz_hazard_at_40"] * math.exp(-g * 40.0)
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "healthy", "sick", Weibull(*p["onset_weibull"]), Clock.ENTRY),
            Transition("recovery", "sick", "healthy", Exponential(p["recovery"]), Clock.STATE),
            Transition("disease death", "sick", "dead", Exponential(p["disease_death"]), Clock.STATE),
        ),
        background=BackgroundMortality("dead", {"all": Gompertz(b, g)}, Clock.AGE),
        population=Population(UniformAge(*p["entry_age"]), "healthy"),
        horizon=Horizon(p["horizon"]),
        strategies=(Strategy("base"),),
        name="benchmark illness-death (invented numbers)",
    )


def chain_model(n_states: int = 10, horizon: float = 50.0) -> Model:
    """A progressive chain of ``n_states - 1`` living states and death, for the cohort-trace figure:
    s_i -> s_{i+1} with constant rates 0.1 + 0.02 i per year (time in state, so still Markov), a
    Weibull (shape 1.2, scale 40 years) disease death from the last living state on time since entry,
    and Gompertz background death on attained age (slope 0.09/year, 0.001/year at 40) from every
    living state. Everyone enters at 50. Invented numbers."""
    names = [f"s{i}" for i in range(n_states - 1)] + ["dead"]
    transitions = [Transition(f"progress {i}", names[i], names[i + 1], Exponential(0.1 + 0.02 * i), Clock.STATE)
                   for i in range(n_states - 2)]
    transitions.append(Transition("disease death", names[-2], "dead", Weibull(1.2, 40.0), Clock.ENTRY))
    b = 0.001 * math.exp(-0.09 * 40.0)
    return Model(
        states=tuple(State(nm, absorbing=(nm == "dead")) for nm in names),
        transitions=tuple(transitions),
        background=BackgroundMortality("dead", {"all": Gompertz(b, 0.09)}, Clock.AGE),
        population=Population(FixedAge(50.0), "s0"),
        horizon=Horizon(horizon),
        name=f"benchmark {n_states}-state chain (invented numbers)",
    )


def latent_draws(model: Model, events: pd.DataFrame, n_patients: int) -> int:
    """Exponential draws the engine consumed: two attribute uniforms per patient, plus one per
    competing exit at every visit of a living state (the initial visit and every move into a living
    state). Counted from the event log, not from the engine's internals."""
    exits = {name: len(model.exits_of(name)) for name in model.state_names}
    initial = model.population.initial_state
    moves_in = events["to_state"].astype(str).map(exits)  # 0 for absorbing states
    return int(2 * n_patients + exits[initial] * n_patients + moves_in.sum())


@dataclass(frozen=True)
class Survival:
    """Overall survival of one run: restricted mean to the horizon and S(t) at SURVIVAL_TIMES, with
    their Monte Carlo standard errors (s / sqrt(N); sqrt(S (1 - S) / N))."""

    n: int
    rmst: float
    rmst_se: float
    s: tuple[float, ...]
    s_se: tuple[float, ...]


def survival_of(death_time: np.ndarray, horizon: float) -> Survival:
    """Survival summaries from per-patient death times (``inf`` or >= horizon for survivors); the
    horizon is common to all patients, so there is no censoring before it."""
    d = np.asarray(death_time, dtype=float)
    n = d.size
    follow = np.minimum(d, horizon)
    s = [float(np.mean(d > t)) for t in SURVIVAL_TIMES]
    return Survival(n=n, rmst=float(follow.mean()), rmst_se=float(follow.std(ddof=1) / math.sqrt(n)),
                    s=tuple(s), s_se=tuple(math.sqrt(max(v * (1 - v), 0.0) / n) for v in s))


def engine_death_times(patients: pd.DataFrame) -> np.ndarray:
    """Death time per patient from the engine's patient table (inf for those alive at the horizon)."""
    absorbed = (patients["exit_reason"] == "absorbed").to_numpy()
    return np.where(absorbed, patients["exit_time"].to_numpy(), np.inf)

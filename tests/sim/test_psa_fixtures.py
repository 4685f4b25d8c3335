"""Shared fixtures of the probabilistic-analysis tests: small invented models and parameter draws of
their own (scipy.stats distributions with fixed seeds), independent of the scenario keys for
distributions. No tests here."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import scipy.stats as st

from sim.hazards import Exponential, Gompertz, Weibull
from sim.model import (BackgroundMortality, Clock, FixedAge, Horizon, Model, Population, State, Strategy, Transition,
                       UniformAge, Valuation)

PARAMETERS = ("progression_rate", "hr_new", "utility_sick", "cost_sick")


def markov_model(background: bool = False, horizon: float = 20.0, weibull: bool = False,
                 entry=None) -> Model:
    """healthy -> sick -> dead and healthy -> dead (invented numbers); strategy "new" halves the
    progression hazard at a yearly cost while healthy."""
    prog = Weibull(1.3, 8.0) if weibull else Exponential(0.12)
    transitions = (Transition("progression", "healthy", "sick", prog, Clock.ENTRY),
                   Transition("death_healthy", "healthy", "dead", Exponential(0.02), Clock.ENTRY),
                   Transition("death_sick", "sick", "dead", Exponential(0.25), Clock.ENTRY))
    bg = BackgroundMortality("dead", {"all": Gompertz(2e-5, 0.09)}) if background else None
    return Model(states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
                 transitions=transitions,
                 population=Population(entry or FixedAge(60.0), "healthy"),
                 horizon=Horizon(horizon), background=bg,
                 strategies=(Strategy("usual"),
                             Strategy("new", hazard_ratios={"progression": 0.6}, state_costs={"healthy": 900.0})),
                 valuation=Valuation(utilities={"healthy": 0.9, "sick": 0.6}, state_costs={"healthy": 100.0, "sick": 4000.0},
                                     transition_costs={"progression": 1500.0}, discount_costs=0.035,
                                     discount_effects=0.035, willingness_to_pay=20000.0),
                 name="psa test model (invented)")


def apply_values(source, values) -> Model:
    """The model with one draw's values (the test's own parameter names); ``source`` a model or scenario."""
    model = source if isinstance(source, Model) else source.model
    prog = model.transitions[0]
    if "progression_rate" in values:
        h = prog.hazard
        new = (Exponential(values["progression_rate"]) if isinstance(h, Exponential)
               else Weibull(h.shape, h.scale * 0.12 / values["progression_rate"]))
        prog = dataclasses.replace(prog, hazard=new)
    strategies = model.strategies
    if "hr_new" in values:
        strategies = (strategies[0], dataclasses.replace(strategies[1], hazard_ratios={"progression": values["hr_new"]}))
    val = model.valuation
    utilities, costs = dict(val.utilities), dict(val.state_costs)
    if "utility_sick" in values:
        utilities["sick"] = values["utility_sick"]
    if "cost_sick" in values:
        costs["sick"] = values["cost_sick"]
    return dataclasses.replace(model, transitions=(prog,) + model.transitions[1:], strategies=strategies,
                               valuation=dataclasses.replace(val, utilities=utilities, state_costs=costs))


def draws_table(n_draws: int, seed: int = 5, names=PARAMETERS) -> pd.DataFrame:
    """Parameter draws (index "draw"): gamma rate, log-normal hazard ratio, beta utility, gamma cost."""
    rng = np.random.default_rng(seed)
    cols = {"progression_rate": st.gamma(a=25.0, scale=0.12 / 25.0).rvs(n_draws, random_state=rng),
            "hr_new": st.lognorm(s=0.25, scale=0.6).rvs(n_draws, random_state=rng),
            "utility_sick": st.beta(60.0, 40.0).rvs(n_draws, random_state=rng),
            "cost_sick": st.gamma(a=16.0, scale=4000.0 / 16.0).rvs(n_draws, random_state=rng)}
    return pd.DataFrame({k: cols[k] for k in names}, index=pd.RangeIndex(n_draws, name="draw"))


def entry_spread() -> UniformAge:
    return UniformAge(50.0, 70.0)

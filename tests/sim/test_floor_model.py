"""``at_least_background`` on the attained-age clock with a sex-specific background and entry ages that
vary: one floor per sex, the exact solver against quadrature of ``max(h_fit, h_bg)`` for one entry age
and sex, the engine against the exact solver within 4 binomial Monte Carlo standard errors (fixed
seed), and ``hazardtrace check``'s words per sex (issue 15 item 5).

The background death that competes from every living state adds ``h_bg`` again: survival in the
single living state is ``exp(-∫ (max(h_fit, h_bg) + h_bg))`` (competing risks, Beyersmann et al. 2009,
Stat Med 28:956-971; docs/methods.md, 'The larger of a fit and the background hazard').
"""

from __future__ import annotations

import math

import numpy as np
from scipy import integrate

from sim.hazards import AtLeastHazard, Gompertz
from sim.model import (BackgroundMortality, Clock, Horizon, Model, Population, State, Transition, UniformAge,
                       transition_effect_words)
from sim.reference.exact import occupancy_for_entry

from .conftest import simulate_within_4_mcse

# invented numbers: a flat disease-death law against a Gompertz background by sex (slope near the
# 0.085/year of adult human mortality, Finch, Pike & Witten 1990, Science 249:902-905)
FIT = Gompertz(rate=0.004, shape=0.03)
BG = {"female": Gompertz(rate=3e-5, shape=0.085), "male": Gompertz(rate=5e-5, shape=0.09)}


def model() -> Model:
    return Model(
        states=(State("alive"), State("dead", absorbing=True)),
        transitions=(Transition("disease death", "alive", "dead", FIT, Clock.AGE, at_least_background=True),),
        background=BackgroundMortality("dead", BG, Clock.AGE),
        population=Population(UniformAge(55.0, 75.0), "alive", {"female": 0.5, "male": 0.5}),
        horizon=Horizon(30.0, "time"),
    )


def test_one_floor_per_sex_on_the_age_clock():
    m = model()
    exits = {e.name: e for per in m.resolve("base") for e in per}
    floors = exits["disease death"].hazards
    assert all(isinstance(h, AtLeastHazard) for h in floors) and floors[0] != floors[1]
    assert [h.floor for h in floors] == [BG["female"], BG["male"]]
    assert floors[0].until == 105.0  # the oldest age reached: 75 + 30


def test_exact_solver_matches_quadrature_for_one_entry_age_and_sex():
    m = model()
    times = np.array([5.0, 15.0, 29.0])
    for code, sex in enumerate(("female", "male")):
        occ, _, _ = occupancy_for_entry(m, "base", 70.0, code, times, 30.0)
        bg = BG[sex]
        total = lambda a: max(float(FIT.hazard(a)), float(bg.hazard(a))) + float(bg.hazard(a))  # noqa: E731
        want = [math.exp(-integrate.quad(total, 70.0, 70.0 + t, epsrel=1e-12, limit=200)[0]) for t in times]
        np.testing.assert_allclose(occ[:, 0], want, rtol=1e-7)


def test_engine_matches_exact_solver_within_4_mcse():
    m = model()
    n = 30_000
    simulate_within_4_mcse(m, n, 99, np.array([5.0, 12.0, 20.0, 29.0]))


def test_check_words_per_sex():
    (words,) = transition_effect_words(model(), "disease death")
    crossings = {}
    for sex, bg in BG.items():  # where the fit falls below: by scipy.optimize.brentq on the two hazards
        from scipy.optimize import brentq
        crossings[sex] = brentq(lambda a: float(FIT.hazard(a) - bg.hazard(a)), 40.0, 105.0, xtol=1e-12)
    assert words.startswith("hazard at least the background hazard; ")
    for sex, age in crossings.items():
        assert f"the fit falls below it from age {age:.1f} (base, {sex})" in words

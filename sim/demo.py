"""The bundled demo model: an invented chronic disease, for illustration only.

"Lanthic syndrome" is fictional; every number below is made up for this project and describes no
real disease or treatment. Background mortality is a Gompertz law on attained age with slope
0.085/year, the order of human adult mortality (Finch, Pike & Witten 1990, Science 249:902-905);
the levels b are invented round numbers (about 3 and 5 deaths per 1000 per year at age 55).

States: ``well`` -> ``lanthic`` (onset, Weibull on time since entry), ``lanthic`` -> ``well``
(recovery, constant on time in state), ``lanthic`` -> ``dead`` (disease death, constant on time in
state), and background death from every living state. Two strategies: ``usual care`` and
``new therapy`` (hazard ratio 0.7 on onset and 0.8 on disease death, at an invented 1,100 a year
while alive). Utilities, costs and the willingness to pay are invented too.
"""

from __future__ import annotations

from .hazards import Exponential, Gompertz, Weibull
from .model import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from .population import NormalAge, Population
from .valuation import Valuation

__all__ = ["demo_model"]


def demo_model(horizon: Horizon | None = None) -> Model:
    """The invented illness-death model with recovery described in the module docstring."""
    return Model(
        name="Lanthic syndrome (invented demo)",
        states=(State("well"), State("lanthic"), State("dead", absorbing=True)),
        transitions=(
            Transition("onset", "well", "lanthic", Weibull(shape=1.3, scale=30.0), Clock.ENTRY),
            Transition("recovery", "lanthic", "well", Exponential(rate=0.15), Clock.STATE),
            Transition("disease death", "lanthic", "dead", Exponential(rate=0.08), Clock.STATE),
        ),
        background=BackgroundMortality(
            target="dead",
            hazards={"female": Gompertz(rate=3.0e-5, shape=0.085), "male": Gompertz(rate=5.0e-5, shape=0.085)},
            clock=Clock.AGE,
        ),
        population=Population(entry_age=NormalAge(mu=55.0, sd=8.0, low=40.0, high=75.0),
                              initial_state="well", sex_mix={"female": 0.5, "male": 0.5}),
        horizon=horizon or Horizon(100.0, "age"),
        strategies=(Strategy("usual care"),
                    Strategy("new therapy", hazard_ratios={"onset": 0.7, "disease death": 0.8},
                             state_costs={"well": 1100.0, "lanthic": 1100.0})),
        valuation=Valuation(utilities={"well": 0.86, "lanthic": 0.58},
                            state_costs={"well": 300.0, "lanthic": 7200.0},
                            transition_costs={"onset": 1500.0, "disease death": 9000.0},
                            discount_costs=0.035, discount_effects=0.035, willingness_to_pay=30_000.0),
    )

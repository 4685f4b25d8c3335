"""The discretization-error study: table shape, orders, tolerance, decisions, semi-Markov reference."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sim.io.demo import demo_model
from sim.hazards import Exponential, Weibull
from sim.model.multistate import Clock, Horizon, Model, State, Transition
from sim.model.population import FixedAge, Population
from sim.reference.study import discretization_study, observed_order
from sim.model.valuation import Valuation


def test_observed_order_recovers_power_law():
    h = np.array([2.0, 1.0, 0.5, 0.25])
    for p in (1.0, 2.0, 4.0):
        assert observed_order(h, 0.3 * h**p, 1e-15) == pytest.approx(p, abs=1e-12)
    assert np.isnan(observed_order(h, np.zeros(4), 1e-15))


@pytest.fixture(scope="module")
def study():
    return discretization_study(demo_model(), tolerance=0.001)


def test_table_is_tidy_and_complete(study):
    t = study.table
    assert list(t.columns[:6]) == ["outcome", "strategy", "cycle_length", "method", "correction", "value"]
    assert {"reference", "error", "relative_error"} <= set(t.columns)
    assert study.reference_kind == "exact"
    n_outcomes = t["outcome"].nunique()
    assert len(t) == n_outcomes * 2 * 6 * 3 * 4  # outcomes x strategies x cycles x methods x corrections
    np.testing.assert_allclose(t["error"], t["value"] - t["reference"])


def test_errors_shrink_and_orders_are_reported(study):
    t = study.table.query("outcome == 'life_years' and method == 'matrix-exponential' and correction == 'half-cycle'")
    err = t.groupby("cycle_length")["error"].apply(lambda e: e.abs().max())
    assert err.is_monotonic_increasing  # longer cycles, larger error
    o = study.orders.query("outcome == 'life_years' and correction == 'start'")["order"]
    np.testing.assert_allclose(o, 1.0, atol=0.1)  # counting at cycle starts is first order


def test_largest_cycle_within_tolerance(study):
    lc = study.largest_cycle
    row = lc.query("outcome == 'life_years' and strategy == 'usual care' and method == 'per-transition' "
                   "and correction == 'start'").iloc[0]
    t = study.table.query("outcome == 'life_years' and strategy == 'usual care' and method == 'per-transition' "
                          "and correction == 'start'").sort_values("cycle_length")
    ok = t["relative_error"].abs() <= 0.001
    expected = t["cycle_length"][ok.cumprod().astype(bool)].max()
    assert row["largest_cycle_length"] == expected


def test_decision_flags(study):
    d = study.decisions
    assert {"delta_costs", "delta_effects", "icer", "nmb", "reference_nmb", "changes_decision"} <= set(d.columns)
    flip = np.sign(d["nmb"]) != np.sign(d["reference_nmb"])
    assert (d["changes_decision"] >= flip).all()
    # the invented demo sits near its threshold: some long-cycle combinations change the decision,
    # the weekly matrix-exponential trace with half-cycle correction does not
    assert d["changes_decision"].any()
    weekly = d.query("method == 'matrix-exponential' and correction == 'half-cycle' and cycle_length < 0.02")
    assert not weekly["changes_decision"].any()
    assert (study.jump_over.query("method == 'matrix-exponential'")["jump_over_share"] > 0).all()


def test_semi_markov_uses_a_simulation_reference():
    model = Model(states=(State("well"), State("sick"), State("dead", absorbing=True)),
                  transitions=(Transition("onset", "well", "sick", Exponential(0.2)),
                               Transition("death", "sick", "dead", Weibull(1.5, 3.0), Clock.STATE)),
                  population=Population(FixedAge(50), "well"), horizon=Horizon(8.0),
                  valuation=Valuation(utilities={"well": 1.0, "sick": 0.5}))
    res = discretization_study(model, cycle_lengths=(0.25, 1.0), methods=("competing-exit",),
                               corrections=("half-cycle",), n_patients=20_000, seed=3)
    assert res.reference_kind.startswith("simulation")
    assert (res.reference.query("outcome == 'life_years'")["mcse"] > 0).all()
    assert any("semi-Markov" in n for n in res.notes)
    t = res.table.query("outcome == 'life_years'")
    assert set(t["cycle_length"]) == {0.25, 1.0}
    np.testing.assert_allclose(t["error"], t["value"] - t["reference"])
    assert (t["reference_mcse"] > 0).all()


def test_study_honours_a_cancel_request():
    """A cancel request stops the study between traces with SimulationCancelled (the run's own
    cancel token reaches it through sim.pipeline.run)."""
    from sim.io.demo import demo_model
    from sim.engine.histories import SimulationCancelled

    with pytest.raises(SimulationCancelled):
        discretization_study(demo_model("lanthic"), cycle_lengths=(1.0,), cancel=lambda: True)


def test_study_reports_progress_per_trace():
    """progress(done, total) follows the traces: one call each, in order, ending at total (2
    strategies x 3 conversions x 2 cycle lengths = 12 traces)."""
    calls = []
    model = demo_model("lanthic")
    study = discretization_study(model, cycle_lengths=(1.0, 0.5), progress=lambda d, n: calls.append((d, n)))
    total = len(model.strategy_names) * 3 * 2
    assert calls == [(i, total) for i in range(1, total + 1)]
    assert len(study.jump_over) == total


def _semi_markov_model() -> Model:
    """Well -> sick -> dead with a Weibull death hazard on time in state (semi-Markov; invented)."""
    return Model(states=(State("well"), State("sick"), State("dead", absorbing=True)),
                 transitions=(Transition("onset", "well", "sick", Exponential(0.2)),
                              Transition("death", "sick", "dead", Weibull(1.5, 3.0), Clock.STATE)),
                 population=Population(FixedAge(50), "well"), horizon=Horizon(8.0),
                 valuation=Valuation(utilities={"well": 1.0, "sick": 0.5}))


def test_a_given_simulated_reference_replaces_the_studys_own_simulation(monkeypatch):
    """A simulation already run (its summarise() table) is the reference: the same tables as the
    study simulating the same patients with the same seed itself, and no second simulation."""
    import sim.reference.study as study_module
    from sim.analysis import patient_outcomes, summarise
    from sim.engine import simulate

    model = _semi_markov_model()
    kwargs = dict(cycle_lengths=(0.25, 1.0), methods=("competing-exit",), n_patients=5_000, seed=3)
    own = discretization_study(model, **kwargs)
    summary = summarise(patient_outcomes(simulate(model, 5_000, 3, chunk_size=1_000)))

    def no_simulation(*args, **kwargs):
        raise AssertionError("the study simulated although it was given its reference")

    monkeypatch.setattr(study_module, "simulate", no_simulation)
    given = discretization_study(model, simulated_reference=summary, **kwargs)
    assert given.reference_kind == own.reference_kind == "simulation (5,000 patients, seed 3)"
    for name in ("table", "reference", "orders", "largest_cycle", "jump_over"):
        pd.testing.assert_frame_equal(getattr(given, name), getattr(own, name), check_exact=True)
    # the reference is the given summary, mean and Monte Carlo standard error as given
    ref = given.reference.set_index(["strategy", "outcome"])
    s = summary.set_index(["strategy", "outcome"])
    np.testing.assert_array_equal(ref.loc[s.index, "value"], s["mean"])
    np.testing.assert_array_equal(ref.loc[s.index, "mcse"], s["mcse"])


def test_a_simulated_reference_is_ignored_for_a_markov_model():
    model = demo_model("lanthic")
    bogus = pd.DataFrame({"strategy": ["x"], "outcome": ["y"], "mean": [1.0], "mcse": [0.1]})
    res = discretization_study(model, cycle_lengths=(1.0,), methods=("competing-exit",), simulated_reference=bogus)
    assert res.reference_kind == "exact"


def test_a_simulated_reference_must_hold_every_outcome_of_every_strategy():
    from sim.analysis import outcome_names
    from sim.problems import ValidationError

    model = _semi_markov_model()
    names = outcome_names(model)
    full = pd.DataFrame({"strategy": model.strategy_names[0], "outcome": list(names), "mean": 1.0, "mcse": 0.1})
    with pytest.raises(ValidationError) as err:
        discretization_study(model, cycle_lengths=(1.0,), simulated_reference=full.iloc[1:])
    assert err.value.problem.path == ("simulated_reference",)
    assert err.value.problem.value == [(model.strategy_names[0], names[0])]
    with pytest.raises(ValidationError) as err:
        discretization_study(model, cycle_lengths=(1.0,), simulated_reference=full.drop(columns="mcse"))
    assert err.value.problem.path == ("simulated_reference",) and "mcse" in err.value.problem.rule

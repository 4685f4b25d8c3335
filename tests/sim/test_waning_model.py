"""Waning hazard ratios and hazards kept at least the background, through the scenario file, the model,
the engine, the exact solver, the pipeline's error study and ``hazardtrace check`` (issue 15 items 5
and 6).

References outside the project: the exact solver's survival against ``exp(-H)`` with ``H`` from
``scipy.integrate.quad`` of ``R(u) h0(u)`` (docs/methods.md, 'Treatment-effect waning') and of
``max(h_fit, h_bg)``; the engine's state occupancy against the exact Kolmogorov forward solution
within 4 binomial Monte Carlo standard errors (fixed seed).
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

from sim.engine import simulate
from sim.hazards import AtLeastHazard, Exponential, Gompertz, Weibull, WaningHazardRatio
from sim.io import load_scenario, parse_scenario
from sim.io.scenario import ScenarioError
from sim.model import Clock, Strategy, Waning, transition_effect_words
from sim.pipeline import RunPlan, run_plan
from sim.reference.exact import solve_exact

from .conftest import occupancy_from_log, single_exit

SCENARIO = Path(__file__).resolve().parents[1] / "data" / "waning.toml"
TEXT = SCENARIO.read_text(encoding="utf-8")


def ratio(t: float, hr: float, t1: float, t2: float, scale: str) -> float:
    """The waning ratio written out (docs/methods.md, 'Treatment-effect waning')."""
    w = min(max((t - t1) / (t2 - t1), 0.0), 1.0)
    return hr ** (1.0 - w) if scale == "log" else hr + w * (1.0 - hr)


def test_scenario_reads_into_waning_and_floor_hazards():
    m = load_scenario(SCENARIO).model
    death = m.transitions[1]
    assert death.hazard_ratio == 1.5
    assert death.waning == Waning(1.0, 3.0, "hr")  # 12 and 36 months in years
    assert death.at_least_background
    assert m.strategy("treated").waning["onset"] == Waning(2.0, 6.0, "log")
    treated = {e.name: e for exits in m.resolve("treated") for e in exits}
    onset = treated["onset"].hazards[0]
    assert isinstance(onset, WaningHazardRatio) and (onset.hr, onset.start, onset.end) == (0.5, 2.0, 6.0)
    floor = treated["disease death"].hazards[0]
    assert isinstance(floor, AtLeastHazard) and isinstance(floor.fit, WaningHazardRatio)
    assert floor.fit.hr == 1.5 and floor.fit.scale == "hr"
    control = {e.name: e for exits in m.resolve("control") for e in exits}
    assert isinstance(control["onset"].hazards[0], Weibull)  # no ratio in the comparator
    assert m.is_markov  # time since entry: the exact solution exists


def test_exact_solver_survival_matches_quadrature_of_the_waning_hazard():
    # alive -> dead with a waning hazard ratio on a Weibull, everyone entering at 50
    base, hr, t1, t2 = Weibull(shape=1.4, scale=12.0), 0.4, 2.0, 7.0
    model = single_exit(WaningHazardRatio(base, hr, t1, t2, "log"), horizon=20.0)
    times = np.array([1.0, 3.0, 5.0, 9.0, 15.0])
    got = solve_exact(model, times).occupancy
    alive = got[got["state"] == "alive"]["probability"].to_numpy()
    want = [math.exp(-integrate.quad(lambda u: ratio(u, hr, t1, t2, "log") * float(base.hazard(u)), 0.0, t,
                                     points=[p for p in (t1, t2) if p < t], epsrel=1e-12)[0]) for t in times]
    np.testing.assert_allclose(alive, want, rtol=1e-7)  # the solver's tolerance (rtol 1e-10 on P)


def test_exact_solver_survival_matches_quadrature_of_the_larger_hazard():
    # a falling Weibull fit kept at least a Gompertz background, on time since entry at age 60
    fit, bg = Weibull(shape=0.6, scale=10.0), Gompertz(rate=3e-5, shape=0.085)
    h = AtLeastHazard(fit, __import__("sim.hazards", fromlist=["ShiftedClock"]).ShiftedClock(bg, 60.0), 30.0)
    assert len(h.crossings) == 1
    model = single_exit(h, horizon=30.0, age=60.0)
    times = np.array([2.0, 10.0, 20.0, 29.0])
    got = solve_exact(model, times).occupancy
    alive = got[got["state"] == "alive"]["probability"].to_numpy()
    larger = lambda u: max(float(fit.hazard(u)), float(bg.hazard(60.0 + u)))  # noqa: E731
    want = [math.exp(-integrate.quad(larger, 0.0, t, points=[c.at for c in h.crossings if c.at < t],
                                     epsrel=1e-12)[0]) for t in times]
    np.testing.assert_allclose(alive, want, rtol=1e-7)


def test_engine_matches_exact_solver_within_4_mcse():
    model = load_scenario(SCENARIO).model
    n = 30_000
    times = np.array([1.0, 3.0, 5.0, 8.0, 14.0, 19.0])
    exact = solve_exact(model, times).occupancy
    run = simulate(model, n, seed=20261205)
    for st in model.strategy_names:
        events = run.events[run.events["strategy"] == st]
        patients = run.patients[run.patients["strategy"] == st]
        table = exact[exact["strategy"] == st].pivot(index="time", columns="state", values="probability")
        for t in times:
            p_hat = occupancy_from_log(events, patients, model.state_names, t)
            p = table.loc[t, list(model.state_names)].to_numpy()
            se = np.sqrt(p * (1 - p) / n)
            assert np.all(np.abs(p_hat - p) <= 4 * se), (st, t, p_hat, p)
    # the waning effect matters here: the treated strategy's onset differs from the comparator's
    treated = exact[(exact["strategy"] == "treated") & (exact["state"] == "well")]["probability"].to_numpy()
    control = exact[(exact["strategy"] == "control") & (exact["state"] == "well")]["probability"].to_numpy()
    assert np.all(treated > control)


def test_pipeline_runs_the_error_study_with_waning_and_floor():
    s = load_scenario(SCENARIO)
    plan = RunPlan.from_scenario(s, patients=200, workers=1)
    plan = replace(plan, cycle_lengths=(1.0,))
    results = run_plan(s, plan, study=True)
    assert results.complete, results.failure_lines()
    assert results.study is not None and len(results.study.table) > 0
    assert results.study.reference_kind == "exact"  # Markov on time since entry: the exact reference


def test_check_describes_the_waning_and_the_floor():
    m = load_scenario(SCENARIO).model
    words = transition_effect_words(m, "disease death")
    assert words[0] == "hazard ratio 1.5 in every strategy, wanes to 1 on the hazard-ratio scale from 1 to 3 years"
    # where the fit falls below the background: from brentq on the two hazards (fit after waning: the base)
    fit, bg = Weibull(shape=0.6, scale=10.0), Gompertz(rate=3e-5, shape=0.085)
    from scipy.optimize import brentq
    cross = brentq(lambda t: float(fit.hazard(t) - bg.hazard(70.0 + t)), 5.0, 20.0, xtol=1e-12)
    assert words[1] == f"hazard at least the background hazard; the fit falls below it from age {70.0 + cross:.1f}"
    assert transition_effect_words(m, "onset") == []


def _problems(text: str):
    with pytest.raises(ScenarioError) as err:
        parse_scenario(text, "w.toml")
    return err.value.problems


def _line_of(text: str, needle: str) -> int:
    return next(i for i, ln in enumerate(text.splitlines(), 1) if needle in ln)


@pytest.mark.parametrize("old,new,key,rule", [
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { start = 6.0, end = 2.0 } }',
     "end", "must be > waning.start"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { start = -1.0, end = 6.0 } }',
     "start", "must be >= 0"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { start = 2.0, end = inf } }',
     "end", "must be finite"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { start = 2.0, end = 6.0, scale = "cubic" } }',
     "scale", "must be one of"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { end = 6.0 } }',
     "onset", "missing required key 'start'"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { onset = { start = 2.0, end = 6.0, stop = 1 } }',
     "stop", "unknown key"),
    ('waning = { start = 12, end = 36, scale = "hr" }', 'waning = { start = 36, end = 36, scale = "hr" }',
     "end", "must be > waning.start"),
    ('waning = { start = 12, end = 36, scale = "hr" }', 'waning = 3', "waning", "must be a table"),
])
def test_bad_waning_keys_name_key_value_rule_and_line(old, new, key, rule):
    text = TEXT.replace(old, new)
    assert text != TEXT
    problems = _problems(text)
    assert len(problems) == 1, problems
    p = problems[0]
    assert p.path[-1] == key and rule in p.rule, p
    assert p.file == "w.toml" and p.line == _line_of(text, new)
    written = {"end": ("6.0", "2.0", "inf", "36"), "start": ("-1.0",)}.get(key)
    if written:
        assert str(p.value) in written or math.isinf(p.value)  # the value as written (months stay months)


@pytest.mark.parametrize("old,new,path_end,rule", [
    # a waning without the ratio that wanes
    ('hazard_ratios = { onset = 0.5 }\n', '', ("waning", "onset"), "needs a hazard ratio"),
    ('hazard_ratio = 1.5\n', '', ("waning",), "needs a hazard_ratio"),
    # a ratio of 0 cannot wane on the log scale
    ('hazard_ratios = { onset = 0.5 }', 'hazard_ratios = { onset = 0.0 }', ("hazard_ratios", "onset"), "must be > 0"),
    # waning times are not ages
    ('scale = 6.0\n', 'scale = 6.0\nclock = "age"\n', ("waning", "onset"), "needs the transition on the 'entry'"),
    # the floor needs a death transition and a shared clock
    ('to = "dead"\nfamily = "weibull"', 'to = "well"\nfamily = "weibull"', ("at_least_background",),
     "must be an absorbing state"),
    ('at_least_background = true', 'at_least_background = true\nclock = "state"',
     ("at_least_background",), "needs the transition on the background's clock"),
    ('waning = { onset = { start = 2.0, end = 6.0 } }', 'waning = { nothing = { start = 2.0, end = 6.0 } }',
     ("waning", "nothing"), "must name a transition"),
])
def test_rules_between_effects_and_the_model_name_key_and_line(old, new, path_end, rule):
    text = TEXT.replace(old, new, 1)
    assert text != TEXT
    problems = _problems(text)
    hits = [p for p in problems if p.path[-len(path_end):] == path_end and rule in p.rule]
    assert hits, problems
    assert hits[0].line is not None and hits[0].file == "w.toml"


def test_model_objects_refuse_bad_waning_with_the_key():
    with pytest.raises(Exception) as err:
        Waning(5.0, 2.0)
    assert err.value.problems[0].path == ("end",)
    with pytest.raises(Exception) as err:
        Waning.at(("strategies", "treated", "waning", "onset"), 1.0, 2.0, "cubic")
    assert err.value.problems[0].path == ("strategies", "treated", "waning", "onset", "scale")
    with pytest.raises(Exception) as err:
        Strategy("s", {"a": 0.5}, waning={"a": (1.0, 2.0)})
    assert err.value.problems[0].path == ("strategies", "s", "waning", "a")
    assert Clock.ENTRY.value == "entry"
    assert isinstance(Exponential(0.1), Exponential)


def test_written_scenario_reads_back_with_its_effects():
    from sim.io.scenario import document_from_model, scenario_text
    m = load_scenario(SCENARIO).model
    again = parse_scenario(scenario_text(document_from_model(m))).model
    assert again.transitions == m.transitions
    assert again.strategies == m.strategies


def test_waning_times_and_ratios_are_parameters_a_draw_can_change():
    # the probabilistic analysis reads a changed part again: waning times in the transition's unit
    from sim.psa import model_for_draw
    s = load_scenario(SCENARIO)
    m = model_for_draw(s, {"strategies[1].waning.onset.end": 8.0, "transitions[1].waning.end": 48.0,
                           "transitions[1].hazard_ratio": 1.2})
    assert m.strategy("treated").waning["onset"] == Waning(2.0, 8.0, "log")
    assert m.transitions[1].waning == Waning(1.0, 4.0, "hr") and m.transitions[1].hazard_ratio == 1.2
    with pytest.raises(ScenarioError) as err:
        model_for_draw(s, {"strategies[1].waning.onset.end": 1.0})
    assert "must be > waning.start" in str(err.value)


def test_hazardtrace_check_reports_the_waning_and_the_floor(capsys):
    from sim.cli.commands import main
    code = main(["check", str(SCENARIO)])
    out = capsys.readouterr().out
    assert code == 0
    assert "transition disease death: hazard ratio 1.5 in every strategy, wanes to 1 on the hazard-ratio scale" in out
    assert "transition disease death: hazard at least the background hazard; the fit falls below it from age" in out
    assert "treated: hazard ratio 0.5 on onset (wanes to 1 on the log scale from 2 to 6 years)" in out


def test_hazardtrace_check_refuses_bad_waning_with_exit_2(tmp_path, capsys):
    from sim.cli.commands import main
    path = tmp_path / "bad.toml"
    path.write_text(TEXT.replace("waning = { onset = { start = 2.0, end = 6.0 } }",
                                 "waning = { onset = { start = 6.0, end = 2.0 } }"), encoding="utf-8")
    code = main(["check", str(path)])
    err = capsys.readouterr().err
    assert code == 2
    line = _line_of(path.read_text(encoding="utf-8"), "start = 6.0")
    assert f"bad.toml:{line}" in err and "strategies[1].waning.onset.end" in err and "must be > waning.start" in err


@pytest.mark.parametrize("chunk_size, workers", [(700, 1), (250, 2)])
def test_same_log_bit_for_bit_for_any_chunking(chunk_size, workers):
    # each lane's quadrature and root finding depend on that lane alone (no BLAS reductions over rows)
    m = load_scenario(SCENARIO).model
    ref = simulate(m, 1500, seed=7, chunk_size=1500, workers=1)
    run = simulate(m, 1500, seed=7, chunk_size=chunk_size, workers=workers)
    import pandas as pd
    pd.testing.assert_frame_equal(run.events, ref.events, check_exact=True)
    pd.testing.assert_frame_equal(run.patients, ref.patients, check_exact=True)


def test_renaming_a_transition_renames_its_waning():
    import tomlkit
    from sim.io.scenario import rename
    doc = tomlkit.parse(TEXT)
    rename(doc, "transitions", 0, "illness onset")
    st = parse_scenario(tomlkit.dumps(doc)).model.strategy("treated")
    assert dict(st.waning) == {"illness onset": Waning(2.0, 6.0, "log")}

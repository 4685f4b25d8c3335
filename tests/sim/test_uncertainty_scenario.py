"""Uncertain inputs in scenario files: reading ``[[uncertainty]]`` (beside or instead of a point value),
writing it back, every bad input reported at its key with file, line, value and rule, and a
scenario without the section read exactly as before."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import tomlkit

from sim.engine import simulate
from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.io.scenario import (ScenarioError, document_from_model, load_scenario, parameters, parse_scenario,
                             scenario_text)
from sim.io.scenario.uncertain import parse_key
from sim.problems import format_key
from sim.psa import model_for_draw, point_values, uncertain_parameters
from sim.uncertainty import Beta, Dirichlet, Gamma, LogNormal, MultivariateNormal, Normal, draw_table

DEMO = SCENARIO_DIR / "quorrel_psa.toml"
LANTHIC = (SCENARIO_DIR / DEMOS["lanthic"]).read_text(encoding="utf-8")


def _with(extra: str, base: str = LANTHIC) -> str:
    return base + "\n" + extra


def test_the_demo_reads_its_uncertain_inputs_beside_and_instead_of_point_values() -> None:
    s = load_scenario(DEMO)
    specs = uncertain_parameters(s)
    keys = [k for u in specs for k in u.keys]
    assert len(keys) == len(set(keys)) == 17
    by_key = {k: u for u in specs for k in u.keys}
    onset = by_key["transitions[0].rate"]
    assert isinstance(onset.distribution, Gamma) and onset.fitted_from == {"mean": 0.08, "se": 0.012}
    assert isinstance(by_key["valuation.utilities.well"].distribution, Beta)
    assert isinstance(by_key['strategies[1].hazard_ratios."disease death"'].distribution, LogNormal)
    assert isinstance(by_key["population.initial_state.mild"].distribution, Dirichlet)
    assert isinstance(by_key["transitions[3].rate"].distribution, MultivariateNormal)
    # beside: the deterministic run keeps the file's point value; instead of: the distribution's mean
    assert s.model.transitions[0].hazard.rate == 0.08
    assert s.model.transitions[2].hazard.rate == 0.05  # remission, no point value in the file
    points = point_values(s)
    assert points["transitions[2].rate"] == 0.05 and points["valuation.utilities.well"] == 0.85
    assert set(keys) <= set(points)


def test_a_parameter_given_only_by_a_distribution_takes_its_mean() -> None:
    text = LANTHIC.replace("rate = 0.15              # per person-year\n", "")
    s = parse_scenario(_with('[[uncertainty]]\nparameter = "transitions[1].rate"\ndistribution = "lognormal"\n'
                             'mu = -2.0\nsigma = 0.3\n', text))
    assert s.model.transitions[1].hazard.rate == pytest.approx(math.exp(-2.0 + 0.09 / 2), rel=1e-15)
    # a cost in a table the file does not have: the table is made
    s = parse_scenario(_with('[[uncertainty]]\nparameter = "strategies[0].state_costs.lanthic"\n'
                             'distribution = "gamma"\nmean = 50.0\nse = 10.0\n'))
    assert s.model.strategies[0].state_costs == {"lanthic": 50.0}
    # a mean that breaks a rule of the model is reported at the parameter
    with pytest.raises(ScenarioError, match="valuation.utilities.dead: must be 0 for an absorbing state"):
        parse_scenario(_with('[[uncertainty]]\nparameter = "valuation.utilities.dead"\ndistribution = "beta"\n'
                             'alpha = 2\nbeta = 3\n'))


BESIDE = """
[[uncertainty]]
parameter = "valuation.utilities.well"
distribution = "beta"
mean = 0.86
se = 0.02

[[uncertainty]]
parameters = ["transitions[0].shape", "transitions[0].scale"]
distribution = "multivariate_normal"
mean = [0.26, 3.4]
covariance = [[0.004, -0.001], [-0.001, 0.01]]
transform = ["log", "log"]

[[uncertainty]]
parameters = ["population.sex_mix.female", "population.sex_mix.male"]
distribution = "dirichlet"
mean = [0.5, 0.5]
sample_size = 400
"""


def test_distributions_beside_point_values_leave_the_run_bit_identical() -> None:
    plain = parse_scenario(LANTHIC, SCENARIO_DIR / "lanthic_syndrome.toml")
    with_dists = parse_scenario(_with(BESIDE), SCENARIO_DIR / "lanthic_syndrome.toml")
    assert plain.uncertainty == () and len(with_dists.uncertainty) == 3
    assert with_dists.model == plain.model and with_dists.run == plain.run
    a = simulate(plain.model, 400, seed=plain.run.seed)
    b = simulate(with_dists.model, 400, seed=with_dists.run.seed)
    pd.testing.assert_frame_equal(a.events, b.events)
    pd.testing.assert_frame_equal(a.patients, b.patients)


def test_writing_and_reading_keeps_the_distributions() -> None:
    s = load_scenario(DEMO)
    text = scenario_text(document_from_model(s.model, s.run, uncertainty=s.uncertainty))
    again = parse_scenario(text, DEMO)
    assert again.uncertainty == s.uncertainty and again.model == s.model
    pd.testing.assert_frame_equal(draw_table(again.uncertainty, 50, 14), draw_table(s.uncertainty, 50, 14))


def test_editing_a_distribution_in_the_document_keeps_every_key_and_comment() -> None:
    text = DEMO.read_text(encoding="utf-8")
    doc = tomlkit.parse(text)
    assert tomlkit.dumps(doc) == text  # tomlkit keeps the file as typed
    doc["uncertainty"][8]["se"] = 0.03  # utility of 'well'
    edited = tomlkit.dumps(doc)
    assert edited.count("#") == text.count("#")
    assert [ln for ln in edited.splitlines() if "#" in ln] == [ln for ln in text.splitlines() if "#" in ln]
    s = parse_scenario(edited, DEMO)
    spec = next(u for u in s.uncertainty if u.keys == ("valuation.utilities.well",))
    assert spec.fitted_from == {"mean": 0.85, "se": 0.03}


def _line(text: str, needle: str, after: str = "") -> int:
    start = text.index(after) if after else 0
    return text[:text.index(needle, start)].count("\n") + 1


BAD = [
    # (entry, key path below uncertainty[0], words of the rule, value)
    ('parameter = "valuation.utilities.well"\ndistribution = "beta"\nmean = 0.86\nse = 0.4\n',
     ("se",), "must be < sqrt(mean (1 - mean)) = 0.347", 0.4),
    ('parameter = "valuation.utilities.well"\ndistribution = "gamma"\nshape = -2\nscale = 1\n',
     ("shape",), "must be > 0", -2),
    ('parameter = "transitions[1].rate"\ndistribution = "normal"\nmean = 0.15\nsd = 0.02\n',
     ("parameter",), "transitions[1].rate must be >= 0; truncate it", "transitions[1].rate"),
    ('parameter = "transitions[0].shape"\ndistribution = "normal"\nmean = 1.3\nsd = 0.1\n',
     ("parameter",), "transitions[0].shape must be > 0", "transitions[0].shape"),  # the Weibull's own domain
    ('parameter = "valuation.utilities.well"\ndistribution = "gamma"\nmean = 0.8\nse = 0.1\n',
     ("parameter",), "can give values above 1", "valuation.utilities.well"),
    ('parameter = "background.female.shape"\ndistribution = "uniform"\nlow = -0.1\nhigh = 0.1\n',
     (), "", None),  # a Gompertz shape may be negative: accepted
    ('parameters = ["transitions[0].shape", "transitions[0].scale"]\ndistribution = "multivariate_normal"\n'
     'mean = [0.26, 3.4]\ncovariance = [[0.004, 0.1], [0.1, 0.01]]\n',
     ("covariance",), "must be positive semi-definite", [[0.004, 0.1], [0.1, 0.01]]),
    ('parameters = ["transitions[0].shape", "transitions[0].scale"]\ndistribution = "multivariate_normal"\n'
     'mean = [0.26, 3.4]\ncovariance = [[0.004, 0.1], [0.1]]\n',
     ("covariance",), "must be square", [[0.004, 0.1], [0.1]]),
    ('parameters = ["population.sex_mix.female", "valuation.utilities.well"]\ndistribution = "dirichlet"\n'
     'alpha = [5, 5]\n', ("parameters",), "do not belong together",
     ["population.sex_mix.female", "valuation.utilities.well"]),
    ('parameters = ["population.sex_mix.female"]\ndistribution = "dirichlet"\nalpha = [5]\n',
     ("alpha",), "at least 2", [5.0]),
    ('parameters = ["population.sex_mix.female", "population.sex_mix.male"]\ndistribution = "dirichlet"\n'
     'mean = [0.5, 0.6]\nsample_size = 100\n', ("mean",), "must sum to 1", [0.5, 0.6]),
    ('parameter = "population.sex_mix.male"\ndistribution = "beta"\nalpha = 5\nbeta = 5\n',
     ("parameter",), "put a dirichlet distribution on all of its shares", "population.sex_mix.male"),
    ('parameter = "valuation.utilities.wel"\ndistribution = "beta"\nalpha = 5\nbeta = 5\n',
     ("parameter",), "names no state", "valuation.utilities.wel"),
    ('parameter = "run.seed"\ndistribution = "uniform"\nlow = 1\nhigh = 2\n',
     ("parameter",), "must name a numeric model parameter", "run.seed"),
    ('parameter = "valuation.willingness_to_pay"\ndistribution = "uniform"\nlow = 1\nhigh = 2\n',
     ("parameter",), "decision rule", "valuation.willingness_to_pay"),
    ('parameter = "valuation.utilities.well"\ndistribution = "beta"\nalpha = 5\nbeta = 5\nmean = 0.5\nse = 0.1\n',
     (), "exactly one of: alpha and beta or mean and se", None),
    ('parameter = "transitions[2].rate"\ndistribution = "gamma"\nmean = 0.08\nse = 0.01\n',
     ("parameter",), "transitions[2] gives its constant hazard by events and per", "transitions[2].rate"),
    ('parameter = "valuation.utilities.well"\ndistribution = "weibull"\n',
     ("distribution",), "must be one of", "weibull"),
    ('parameter = "valuation.utilities.well"\ndistribution = "uniform"\nlow = 0.5\nhigh = 0.9\nmode = 0.7\n',
     ("mode",), "unknown key", 0.7),
]


@pytest.mark.parametrize("entry, key, words, value", BAD, ids=[f"{i}" for i in range(len(BAD))])
def test_bad_input_names_the_key_the_value_the_rule_and_the_line(entry, key, words, value) -> None:
    text = _with("[[uncertainty]]\n" + entry)
    if not words:
        if value is None and not key:
            parse_scenario(text, "scen.toml")  # accepted
            return
    with pytest.raises(ScenarioError) as err:
        parse_scenario(text, "scen.toml")
    problem = err.value.problem
    assert len(err.value.problems) == 1, str(err.value)
    assert problem.path == ("uncertainty", 0, *key), str(err.value)
    assert words in problem.rule and problem.file == "scen.toml"
    if value is not None:
        assert problem.value == value
    where = key[0] if key else "[[uncertainty]]"
    assert problem.line == _line(text, where if key else "[[uncertainty]]", after="[[uncertainty]]")
    assert f"scen.toml:{problem.line}: uncertainty[0]" in str(err.value)


def test_a_correlated_group_by_standard_errors_and_a_hazard_ratio_by_its_interval() -> None:
    text = _with("""
[[uncertainty]]
parameters = ["transitions[0].shape", "transitions[0].scale"]
distribution = "multivariate_normal"
mean = [0.262, 3.4]
se = [0.06, 0.1]
correlation = [[1.0, -0.3], [-0.3, 1.0]]
transform = ["log", "log"]

[[uncertainty]]
parameter = "strategies[1].hazard_ratios.onset"
distribution = "lognormal"
interval = [0.55, 0.89]
""")
    s = parse_scenario(text)
    mvn, hr = (u.distribution for u in s.uncertainty)
    np.testing.assert_allclose(np.array(mvn.covariance), [[0.0036, -0.0018], [-0.0018, 0.01]], rtol=1e-14)
    assert hr.interval() == pytest.approx((0.55, 0.89), rel=1e-12)
    again = parse_scenario(scenario_text(document_from_model(s.model, s.run, uncertainty=s.uncertainty)))
    assert again.uncertainty == s.uncertainty
    # inputs fitted from lists (an interval, a correlation matrix) can be hashed: a draw applies
    assert len({*s.uncertainty}) == 2
    values = draw_table(s.uncertainty, 1, seed=3).iloc[0].to_dict()
    drawn = model_for_draw(s, values)
    assert drawn.strategies[1].hazard_ratios["onset"] == values["strategies[1].hazard_ratios.onset"]
    with pytest.raises(ScenarioError) as err:
        parse_scenario(text.replace("[-0.3, 1.0]]", "[-0.3, 0.9]]"), "scen.toml")
    assert err.value.problem.path == ("uncertainty", 0, "correlation", 1, 1)
    assert err.value.problem.line == _line(text, "correlation = ")


def test_a_parameter_named_by_two_entries_and_every_problem_at_once() -> None:
    entry = '[[uncertainty]]\nparameter = "valuation.utilities.well"\ndistribution = "beta"\nalpha = 5\nbeta = 5\n'
    bad = '[[uncertainty]]\nparameter = "nothing"\ndistribution = "beta"\nalpha = 5\nbeta = 5\n'
    with pytest.raises(ScenarioError) as err:
        parse_scenario(_with(entry + bad + entry), "scen.toml")
    paths = [p.path for p in err.value.problems]
    assert paths == [("uncertainty", 1, "parameter"), ("uncertainty", 2)]
    assert "already has a distribution (uncertainty[0])" in err.value.problems[1].rule


def test_a_scenario_without_uncertainty_is_read_as_before() -> None:
    for name in DEMOS:
        path = SCENARIO_DIR / DEMOS[name]
        if "[[uncertainty]]" in path.read_text(encoding="utf-8"):
            continue  # the probabilistic-analysis demo
        s = load_scenario(path)
        assert s.uncertainty == () and uncertain_parameters(s) == () and uncertain_parameters(s.model) == ()


@pytest.mark.parametrize("text", ["valuation.utilities.well", "transitions[0].shape",
                                  'strategies[1].hazard_ratios."disease death"', "transitions[2].rates[3]",
                                  'valuation.transition_costs."a \\"quoted\\" name"'])
def test_parameter_names_read_back_as_format_key_writes_them(text: str) -> None:
    path = parse_key(text)
    assert path is not None and format_key(path).replace('\\"', '"') == text.replace('\\"', '"')


@pytest.mark.parametrize("text", ["", ".a", "a.", "a..b", "[0]", "a[x]", "a b", 'a."b', "a[0]b"])
def test_text_that_is_not_a_parameter_name(text: str) -> None:
    assert parse_key(text) is None


def test_every_parameter_of_the_demos_can_be_named() -> None:
    for path in sorted(SCENARIO_DIR.glob("*.toml")):
        doc = tomlkit.parse(path.read_text(encoding="utf-8")).unwrap()
        for p in parameters(doc):
            assert parse_key(p.key) == p.path


def test_normal_truncated_at_zero_is_accepted_on_a_rate() -> None:
    s = parse_scenario(_with('[[uncertainty]]\nparameter = "transitions[1].rate"\ndistribution = "normal"\n'
                             'mean = 0.15\nsd = 0.05\nlow = 0.0\n'))
    d = s.uncertainty[0].distribution
    assert isinstance(d, Normal) and d.low == 0.0 and np.isinf(d.high)


def test_check_describes_the_uncertain_inputs_and_refuses_bad_ones(tmp_path: Path, capsys) -> None:
    import io

    from sim.cli.commands import main
    from sim.report import describe as describe_model
    out = io.StringIO()
    assert main(["check", str(DEMO)], out=out) == 0
    text = out.getvalue()
    assert "Uncertain inputs (17 parameters; draws reproducible from seed 14):" in text
    assert "valuation.utilities.well: beta(alpha=270.087, beta=47.6625) (method of moments from mean 0.85, " \
           "se 0.02)" in text
    assert "no point value in the file: the deterministic run uses the mean" in text
    # without [[uncertainty]]: the model's description and nothing else
    for name in DEMOS:
        if "[[uncertainty]]" in (SCENARIO_DIR / DEMOS[name]).read_text(encoding="utf-8"):
            continue  # the probabilistic-analysis demo itself
        out = io.StringIO()
        assert main(["check", str(SCENARIO_DIR / DEMOS[name])], out=out) == 0
        assert out.getvalue() == describe_model(load_scenario(SCENARIO_DIR / DEMOS[name])) + \
            "\n\nThe scenario is valid.\n"
    bad = tmp_path / "bad.toml"
    text = _with("[[uncertainty]]\n" + BAD[0][0])
    bad.write_text(text, encoding="utf-8")
    out = io.StringIO()
    assert main(["check", str(bad)], out=out) == 2
    line = _line(text, "se = 0.4")
    shown = out.getvalue() + capsys.readouterr().err
    assert f"{bad}:{line}: uncertainty[0].se: must be < sqrt(mean (1 - mean)) = 0.347" in shown


def test_renaming_a_state_or_transition_renames_it_in_parameter_names() -> None:
    from sim.io.scenario import rename
    doc = tomlkit.parse(DEMO.read_text(encoding="utf-8"))
    rename(doc, "states", 1, "mild stage")  # mild
    rename(doc, "transitions", 1, "worsening")  # progression
    s = parse_scenario(tomlkit.dumps(doc), DEMO)
    keys = {k for u in s.uncertainty for k in u.keys}
    assert {'valuation.utilities."mild stage"', 'population.initial_state."mild stage"',
            "strategies[1].hazard_ratios.worsening", "valuation.transition_costs.worsening"} <= keys
    assert not any("mild" in k.replace("mild stage", "") or "progression" in k for k in keys)
    before = load_scenario(DEMO)
    assert [u.distribution for u in s.uncertainty] == [u.distribution for u in before.uncertainty]


def test_a_hazard_parameter_given_only_by_a_distribution_is_checked_against_the_family() -> None:
    text = LANTHIC.replace("shape = 1.3\n", "", 1)  # the Weibull onset's shape: only a distribution
    entry = '[[uncertainty]]\nparameter = "transitions[0].shape"\ndistribution = "normal"\nmean = 1.3\nsd = 0.1\n'
    with pytest.raises(ScenarioError) as err:
        parse_scenario(_with(entry, text))
    assert "transitions[0].shape must be > 0" in err.value.problem.rule
    s = parse_scenario(_with(entry.replace("sd = 0.1", "sd = 0.1\nlow = 0.5"), text))
    assert s.model.transitions[0].hazard.shape == pytest.approx(s.uncertainty[0].distribution.mean, rel=1e-15)


def test_a_sex_mix_given_only_by_a_dirichlet() -> None:
    text = LANTHIC.replace("sex_mix = { female = 0.5, male = 0.5 }\n", "")
    entry = ('[[uncertainty]]\nparameters = ["population.sex_mix.female", "population.sex_mix.male"]\n'
             'distribution = "dirichlet"\nalpha = [30, 10]\n')
    s = parse_scenario(_with(entry, text))
    assert s.model.population.sex_mix == {"female": 0.75, "male": 0.25}


def test_a_distribution_alone_for_a_preview() -> None:
    from sim.io.scenario import distribution_of
    d, fitted = distribution_of({"parameter": "anything", "distribution": "beta", "mean": 0.86, "se": 0.02})
    assert isinstance(d, Beta) and (d.alpha, d.beta) == pytest.approx((258.0, 42.0), rel=1e-12)
    assert fitted == {"mean": 0.86, "se": 0.02}
    with pytest.raises(ScenarioError) as err:
        distribution_of({"distribution": "gamma", "mean": 5.0, "se": -1.0, "bogus": 1})
    assert [p.path for p in err.value.problems] == [("bogus",), ("se",)]

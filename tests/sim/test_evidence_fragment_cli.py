"""``hazardtrace fit DATA --arm-column ... --reference ...`` writes the two-arm fragment: the compared
arm's hazard ratio for its strategy and the compared-arm covariance group, the same as
sim.evidence.compared_arm_group on the same fit, and read by sim.io.load_scenario when pasted into the
invented evidence test scenario. Swapping the reference arm inverts a proportional-hazards ratio
(the Weibull PH model is the same family either way, so the maximum-likelihood log hazard ratio only
changes sign: invariance of the MLE under reparameterisation, common practice, no source).
Data: tests/data/evidence/two_arm_trial.csv (invented)."""

from __future__ import annotations

import io
import tomllib
from pathlib import Path

import numpy as np
import pytest
import tomlkit

from sim.cli.commands import main
from sim.evidence import compared_arm_group, fit_family, read_survival_data, reference_first
from sim.io import load_scenario

DATA = Path(__file__).resolve().parents[1] / "data" / "evidence"
TRIAL = DATA / "two_arm_trial.csv"
SCENARIO = DATA / "scenario.toml"  # invented: transitions[0] is "disease death", one strategy "usual care"


def _run(argv: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    return main(argv, out=out), out.getvalue()


def _fit_args(tmp_path: Path, reference: str, *extra: str) -> tuple[int, str, dict]:
    frag = tmp_path / f"fits_{reference}.toml"
    code, text = _run(["fit", str(TRIAL), "--time", "months", "--event", "death", "--arm-column", "arm",
                       "--reference", reference, "--unit", "months", "--families", "weibull", "loglogistic",
                       "--transition", "disease death", "--transition-index", "0", "--strategy-index", "1",
                       "--output", str(frag), *extra])
    return code, text, tomllib.loads(frag.read_text()) if frag.exists() else {}


def test_cli_writes_ratio_and_group(tmp_path, capsys):
    code, text, doc = _fit_args(tmp_path, "treated")
    assert code == 0, capsys.readouterr().err
    assert "arm 'control' against the reference arm 'treated'" in text
    assert 'strategies[1].hazard_ratios."disease death"' in text
    data = reference_first(read_survival_data(TRIAL, time="months", event="death", group="arm", unit="months"),
                           "treated")
    fit = fit_family(data, "weibull")
    assert fit.effect.reference == "treated"
    assert doc["chosen"] == {"family": "weibull", "unit": "months", **fit.parameters}
    assert doc["chosen_strategy"] == {"hazard_ratios": {"disease death": pytest.approx(np.exp(fit.theta[-1]),
                                                                                        rel=1e-15)}}
    expected = compared_arm_group(fit, transition=0, transition_name="disease death", strategy=1)
    assert doc["chosen_uncertainty"] == expected
    assert doc["two_arms"]["weibull"]["uncertainty"] == expected
    # the log-logistic fit is an acceleration factor: a replacement hazard, said so in the fragment
    assert "replacements" in doc["two_arms"]["loglogistic"]["strategy"]
    assert "accelerated-failure-time" in (tmp_path / "fits_treated.toml").read_text()
    # pasted into the invented scenario (a second strategy for the compared arm): read back
    scenario = tomlkit.parse(SCENARIO.read_text())
    t = scenario["transitions"][0]
    del t["rate"]
    for k, v in doc["chosen"].items():
        t[k] = v
    strategy = tomlkit.table()
    strategy["name"] = "control arm"
    for k, v in doc["chosen_strategy"].items():
        strategy[k] = v
    scenario["strategies"].append(strategy)
    scenario["uncertainty"] = tomlkit.aot()
    scenario["uncertainty"].append(doc["chosen_uncertainty"])
    path = tmp_path / "pasted.toml"
    path.write_text(tomlkit.dumps(scenario))
    read = load_scenario(path)
    assert read.model.strategies[1].hazard_ratios["disease death"] == pytest.approx(np.exp(fit.theta[-1]), rel=1e-15)
    assert read.uncertainty[0].keys[-1] == 'strategies[1].hazard_ratios."disease death"'


def test_swapping_the_reference_inverts_the_hazard_ratio(tmp_path, capsys):
    _, _, treated = _fit_args(tmp_path, "treated")
    _, _, control = _fit_args(tmp_path, "control")
    hr_t = treated["chosen_strategy"]["hazard_ratios"]["disease death"]
    hr_c = control["chosen_strategy"]["hazard_ratios"]["disease death"]
    # both are maxima to the optimiser's Newton-decrement tolerance (1e-8 in log-likelihood units):
    # log HR agrees to about sqrt(2 x 1e-8 x var(log HR)) ~ 4e-5 (a quadratic log-likelihood)
    assert np.log(hr_t) == pytest.approx(-np.log(hr_c), abs=4e-5)
    # the variance of the log hazard ratio is the same either way, up to the central-difference Hessian's
    # step (1e-4 max(1, |theta|), error of order step^2 = 1e-8) taken at optima ~4e-5 apart (third
    # derivatives of order 1 give relative differences of order 1e-4)
    assert treated["chosen_uncertainty"]["covariance"][-1][-1] == pytest.approx(
        control["chosen_uncertainty"]["covariance"][-1][-1], rel=1e-4)


def test_cli_reference_must_be_an_arm(tmp_path, capsys):
    code, _, doc = _fit_args(tmp_path, "placebo")
    assert code == 2 and not doc
    err = capsys.readouterr().err
    assert "--reference" in err and "placebo" in err and "control" in err

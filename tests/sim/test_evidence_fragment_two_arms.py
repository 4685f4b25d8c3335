"""A two-arm fit's compared arm written into the model (sim.evidence.compared_arm, compared_arm_group,
fragment_text): the fragment's keys pasted into a scenario are read by sim.io.load_scenario; the
model's hazard ratio is exp(fitted log hazard ratio); the compared-arm covariance group's covariance
is the fit's (inverse observed information) block; and the group's draws (sim.uncertainty.draw_table,
fixed seed) reproduce that covariance within 4 standard errors of a sample covariance,
se(s_ij) = sqrt((S_ii S_jj + S_ij^2) / (n - 1)) for normal data (Anderson 2003, An Introduction to
Multivariate Statistical Analysis, 3rd ed., section 3.3, from memory). Accelerated-failure-time
families are written as the compared arm's replacement hazard, S_1(t) = S_0(t / AF) (common practice,
no source). Data: tests/data/evidence/two_arm_trial.csv (invented)."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from sim.evidence import (ComparedArm, SurvivalData, compared_arm, compared_arm_group, fit_family, fragment_text,
                          read_survival_data)
from sim.hazards import make_hazard
from sim.io import load_scenario
from sim.problems import ValidationError
from sim.uncertainty import MultivariateNormal, draw_table

from .conftest import two_state_text

TRIAL = Path(__file__).resolve().parents[1] / "data" / "evidence" / "two_arm_trial.csv"
N_DRAWS = 20_000


@pytest.fixture(scope="module")
def trial() -> SurvivalData:
    return read_survival_data(TRIAL, time="months", event="death", group="arm", unit="months")


def _toml(value) -> str:
    """A plain value as TOML (strings double-quoted; lists and inline tables of them)."""
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_toml(k)} = {_toml(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return repr(float(value)) if not isinstance(value, bool) else str(value).lower()


def _pasted(tmp_path: Path, fragment: str):
    """[chosen] into the death transition of the alive -> dead scenario, [chosen_strategy] into its second
    strategy, [chosen_uncertainty] as its one [[uncertainty]] table: the scenario as read back."""
    doc = tomllib.loads(fragment)
    hazard = "\n".join(f"{k} = {_toml(v)}" for k, v in doc["chosen"].items())
    strategy = "\n".join(f"{k} = {_toml(v)}" for k, v in doc["chosen_strategy"].items())
    group = "\n".join(f"{k} = {_toml(v)}" for k, v in doc["chosen_uncertainty"].items())
    text = (f"format_version = 1\n{two_state_text(hazard)}[[strategies]]\nname = \"control\"\n"
            f"[[strategies]]\nname = \"treated\"\n{strategy}\n[[uncertainty]]\n{group}\n")
    path = tmp_path / "pasted.toml"
    path.write_text(text)
    return load_scenario(path), doc


def _check_draws(spec, mean: np.ndarray, cov: np.ndarray, seed: int) -> np.ndarray:
    """Draws of the group on its estimation scale: their mean within 4 MCSE of ``mean``, their sample
    covariance within 4 standard errors of ``cov``; returns the draws (estimation scale)."""
    dist = spec.distribution
    values = draw_table([spec], N_DRAWS, seed).to_numpy()
    z = values.copy()
    logs = np.array(dist.transforms) == "log"
    z[:, logs] = np.log(values[:, logs])
    n = N_DRAWS
    np.testing.assert_array_less(np.abs(z.mean(axis=0) - mean), 4.0 * np.sqrt(np.diag(cov) / n) + 1e-300)
    s = np.cov(z, rowvar=False)
    d = np.diag(cov)
    se = np.sqrt((np.outer(d, d) + cov ** 2) / (n - 1))
    np.testing.assert_array_less(np.abs(s - cov), 4.0 * se + 1e-300)
    return z


@pytest.mark.parametrize("family, breaks", [("exponential", None), ("weibull", None), ("gompertz", None),
                                            ("piecewise", [0.0, 12.0])])
def test_hazard_ratio_and_joint_group(tmp_path, trial, family, breaks):
    fit = fit_family(trial, family, breaks=breaks)
    assert fit.converged and fit.effect.kind == "hazard_ratio"
    scenario, doc = _pasted(tmp_path, fragment_text([fit], transition=0, transition_name="death", strategy=1))
    model = scenario.model
    # the model's hazard ratio is exp(fitted log hazard ratio)
    log_hr = fit.estimates[-1]
    assert fit.names[-1] == "log_hazard_ratio"
    assert model.strategies[1].hazard_ratios["death"] == pytest.approx(np.exp(log_hr), rel=1e-15)
    assert dict(model.strategies[0].hazard_ratios) == {}
    # the group: the reference parameters and the hazard ratio, the fit's joint covariance on its scale
    (spec,) = scenario.uncertainty
    p = len(fit.spec.names)
    assert spec.keys == tuple(f"transitions[0].{n}" for n in fit.spec.names) + ("strategies[1].hazard_ratios.death",)
    dist = spec.distribution
    assert isinstance(dist, MultivariateNormal)
    assert dist.transforms == (("log", "identity", "log") if family == "gompertz" else ("log",) * (p + 1))
    np.testing.assert_allclose(dist.mean, fit.theta, rtol=1e-15, atol=0)
    np.testing.assert_allclose(np.array(dist.covariance), fit.theta_covariance, rtol=1e-15, atol=1e-300)
    # ... and the delta method gives back the fit's reported covariance (J = d value / d theta)
    jac = np.diag(np.where(np.array(dist.transforms) == "log", np.exp(fit.theta), 1.0))
    jac[-1, -1] = 1.0  # the fit reports log_hazard_ratio itself
    np.testing.assert_allclose(jac @ np.array(dist.covariance) @ jac.T, fit.covariance, rtol=1e-10, atol=1e-300)
    _check_draws(spec, np.array(dist.mean), np.array(dist.covariance), seed=20261205)


@pytest.mark.parametrize("family", ["loglogistic", "lognormal", "gamma"])
def test_acceleration_factor_is_written_as_a_replacement(tmp_path, trial, family):
    fit = fit_family(trial, family)
    assert fit.converged and fit.effect.kind == "acceleration_factor"
    arm = compared_arm(fit, transition="death", strategy=1)
    assert arm.place == "replacements" and arm.hazard_ratio is None
    assert "acceleration factor" in arm.note and "replacements" in arm.note
    text = fragment_text([fit], transition=0, transition_name="death", strategy=1)
    assert "accelerated-failure-time family" in text and "acceleration factor" in text
    scenario, doc = _pasted(tmp_path, text)
    model = scenario.model
    assert dict(model.strategies[1].hazard_ratios) == {}
    replaced = model.strategies[1].replacements["death"]
    reference = model.transitions[0].hazard
    # S_1(t) = S_0(t / AF): on the model's clock in years, H_1(t) = H_0(t / AF)
    t = np.array([0.5, 1.0, 3.0, 10.0])
    af = fit.effect.estimate
    np.testing.assert_allclose(replaced.cumhazard(t), reference.cumhazard(t / af), rtol=1e-10)
    # the replacement holds the compared arm's own parameters (months, as fitted)
    assert doc["chosen_strategy"]["replacements"]["death"] == {"family": family, "unit": "months",
                                                              **fit.compared_parameters()}
    # the group: reference parameters and the replacement's, the reference block the fit's own
    (spec,) = scenario.uncertainty
    p = len(fit.spec.names)
    assert spec.keys == (tuple(f"transitions[0].{n}" for n in fit.spec.names)
                         + tuple(f"strategies[1].replacements.death.{n}" for n in fit.spec.names))
    dist = spec.distribution
    cov = np.array(dist.covariance)
    np.testing.assert_allclose(cov[:p, :p], fit.theta_covariance[:p, :p], rtol=1e-15, atol=1e-300)
    np.testing.assert_allclose(dist.mean[:p], fit.theta[:p], rtol=1e-15)
    # the replacement's mean gives back the compared arm's parameters
    compared = [fit.compared_parameters()[n] for n in fit.spec.names]
    back = np.where(np.array(dist.transforms[p:]) == "log", np.exp(dist.mean[p:]), dist.mean[p:])
    np.testing.assert_allclose(back, compared, rtol=1e-12)
    # draws: the reference block reproduces the fit's covariance; the replacement's time-scale parameter
    # minus the reference's is the log acceleration factor, with the fit's variance and covariances
    z = _check_draws(spec, np.array(dist.mean), cov, seed=51)
    scale = fit.spec.names.index("mu" if family == "lognormal" else "scale")
    beta = z[:, p + scale] - z[:, scale]
    others = [i for i in range(p) if i != scale]
    # the shared shape: the same draw, up to the sampler's square root of a singular matrix (round-off
    # eigenvalues of order eps * lambda_max clipped to 0 leave errors of order sqrt(eps * lambda_max))
    lam = float(np.max(np.linalg.eigvalsh(cov)))
    atol = 10.0 * np.sqrt(np.finfo(float).eps * lam)
    np.testing.assert_allclose(z[:, p + others[0]], z[:, others[0]], rtol=0, atol=atol)
    sigma = fit.theta_covariance
    joint = np.cov(np.column_stack([z[:, :p], beta]), rowvar=False)
    d = np.diag(sigma)
    se = np.sqrt((np.outer(d, d) + sigma ** 2) / (N_DRAWS - 1))
    np.testing.assert_array_less(np.abs(joint - sigma), 4.0 * se)
    assert abs(beta.mean() - fit.theta[-1]) < 4.0 * np.sqrt(sigma[-1, -1] / N_DRAWS)


def test_refusals_name_the_fit(trial):
    one = fit_family(trial.arm("control"), "weibull")
    with pytest.raises(ValidationError) as err:
        compared_arm(one, transition="death", strategy=1)
    assert err.value.problem.path == ("arm",) and "one arm" in err.value.problem.rule
    gengamma = fit_family(trial, "gengamma")
    with pytest.raises(ValidationError) as err:
        compared_arm_group(gengamma, transition=0, transition_name="death", strategy=1)
    assert err.value.problem.path == ("family",) and err.value.problem.value == "gengamma"
    with pytest.raises(ValidationError) as err:
        compared_arm(fit_family(trial, "weibull"), transition="death", strategy=-1)
    assert err.value.problem.path == ("strategy",)


def test_strategy_keys_and_quoted_names(trial):
    fit = fit_family(trial, "weibull")
    arm = compared_arm(fit, transition="disease death", strategy=2)
    assert isinstance(arm, ComparedArm)
    assert arm.strategy_keys() == {"hazard_ratios": {"disease death": arm.hazard_ratio}}
    group = compared_arm_group(fit, transition=3, transition_name="disease death", strategy=2)
    assert group["parameters"][-1] == 'strategies[2].hazard_ratios."disease death"'
    assert group["parameters"][0] == "transitions[3].shape"


def test_every_fit_has_its_two_arm_tables(trial):
    fits = [fit_family(trial, f) for f in ("weibull", "loglogistic", "gengamma")]
    doc = tomllib.loads(fragment_text(fits, transition=2, transition_name="death", strategy=3))
    assert set(doc["two_arms"]) == {"weibull", "loglogistic"}  # gengamma is not a scenario family
    chosen = doc["chosen"]["family"]
    assert doc["two_arms"][chosen]["strategy"] == doc["chosen_strategy"]
    assert doc["two_arms"][chosen]["uncertainty"] == doc["chosen_uncertainty"]
    assert doc["two_arms"]["weibull"]["uncertainty"]["parameters"][0] == "transitions[2].shape"
    assert doc["two_arms"]["loglogistic"]["strategy"]["replacements"]["death"]["family"] == "loglogistic"
    # the [fits.<family>] tables keep their keys (hazard, compared_arm, uncertainty, statistics)
    assert set(doc["fits"]["weibull"]) == {"family", "unit", "shape", "scale", "compared_arm", "uncertainty",
                                           "statistics"}

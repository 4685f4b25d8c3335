"""A fit's covariance as an ``[[uncertainty]]`` entry (sim.evidence.Fit.uncertainty_group): the
group's covariance on the estimation scale maps back to the fit's covariance by the delta method, the
scenario reader accepts the entry with the fitted hazard, and the exponential's one-parameter entry
has the closed-form variance of a log rate (events d: var(log rate) = 1/d, common practice, no source).
Data simulated with fixed seeds."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
import tomlkit

from sim.evidence import SurvivalData, fit_family
from sim.io.scenario import parse_scenario
from sim.uncertainty import LogNormal, MultivariateNormal

SCENARIO = Path(__file__).resolve().parents[1] / "data" / "evidence" / "scenario.toml"


@pytest.fixture(scope="module")
def data() -> SurvivalData:
    rng = np.random.default_rng(151205)
    n = 400
    arm = np.where(np.arange(n) % 2 == 0, "control", "treated")
    life = 20.0 * rng.weibull(1.3, n) * np.where(arm == "treated", 1.4, 1.0)
    censor = rng.uniform(5.0, 40.0, n)
    return SurvivalData.from_arrays(np.minimum(life, censor), (life <= censor).astype(int), group=arm, unit="months")


def _scenario_with(fit, transition: int = 0):
    """The invented test scenario with the fitted hazard in the transition and the group in place of the
    old hazard's entry."""
    doc = tomlkit.parse(SCENARIO.read_text())
    table = doc["transitions"][transition]
    for key in ("rate",):
        del table[key]
    for key, value in fit.hazard_keys().items():
        table[key] = value
    doc["uncertainty"] = tomlkit.aot()
    doc["uncertainty"].append(fit.uncertainty_group(transition))
    return parse_scenario(tomlkit.dumps(doc), file=str(SCENARIO))


@pytest.mark.parametrize("family", ["weibull", "gompertz", "loglogistic", "lognormal", "gamma"])
def test_group_covariance_maps_back_by_the_delta_method(data: SurvivalData, family: str) -> None:
    fit = fit_family(data, family)
    assert fit.converged and fit.effect is not None
    group = fit.uncertainty_group(0)
    p = len(fit.spec.names)
    assert group["parameters"] == [f"transitions[0].{name}" for name in fit.spec.names]
    assert group["distribution"] == "multivariate_normal"
    mean, cov = np.array(group["mean"]), np.array(group["covariance"])
    # values = g(theta): exp for positive parameters; delta method J cov J' with J = diag(dg/dtheta)
    positive = np.array([t == "log" for t in group.get("transform", ["identity"] * p)])
    np.testing.assert_array_equal(positive, np.array(fit.spec.positive))
    values = np.where(positive, np.exp(mean), mean)
    np.testing.assert_allclose(values, fit.estimates[:p], rtol=1e-12)
    jac = np.diag(np.where(positive, values, 1.0))
    np.testing.assert_allclose(jac @ cov @ jac.T, fit.covariance[:p, :p], rtol=1e-10, atol=0)
    # the scenario reads it, with the same distribution
    read = _scenario_with(fit).uncertainty
    assert len(read) == 1 and read[0].keys == tuple(group["parameters"])
    dist = read[0].distribution
    assert isinstance(dist, MultivariateNormal)
    np.testing.assert_array_equal(np.array(dist.mean), mean)
    np.testing.assert_array_equal(np.array(dist.covariance), cov)


def test_exponential_gives_a_lognormal_with_variance_one_over_events(data: SurvivalData) -> None:
    one = data.arm("control")
    fit = fit_family(one, "exponential")
    group = fit.uncertainty_group(0, description="invented data")
    assert group == {"parameter": "transitions[0].rate", "distribution": "lognormal", "mu": pytest.approx(
        np.log(one.n_events / one.time.sum()), rel=1e-9), "sigma": pytest.approx(one.n_events ** -0.5, rel=1e-4),
        "description": "invented data"}
    read = _scenario_with(fit).uncertainty
    assert isinstance(read[0].distribution, LogNormal) and read[0].keys == ("transitions[0].rate",)


def test_piecewise_rates_are_named_by_index(data: SurvivalData) -> None:
    fit = fit_family(data.arm("control"), "piecewise", breaks=[0.0, 12.0])
    group = fit.uncertainty_group(0)
    assert group["parameters"] == ["transitions[0].rates[0]", "transitions[0].rates[1]"]
    assert group["transform"] == ["log", "log"]
    assert _scenario_with(fit).uncertainty[0].keys == tuple(group["parameters"])


def test_no_group_without_a_covariance(data: SurvivalData) -> None:
    fit = fit_family(data, "weibull")
    assert dataclasses.replace(fit, theta_covariance=None, covariance=None).uncertainty_group(0) is None
    assert fit_family(data, "gengamma").uncertainty_group(0) is None  # not a scenario family


def test_hazard_keys_of_both_arms(data: SurvivalData) -> None:
    fit = fit_family(data, "weibull")
    assert fit.hazard_keys() == {"family": "weibull", "unit": "months", "shape": fit.parameters["shape"],
                                 "scale": fit.parameters["scale"]}
    compared = fit.hazard_keys("compared")
    # proportional hazards: HR (t/scale)^shape = (t/scale')^shape with scale' = scale HR^(-1/shape)
    hr = fit.effect.estimate
    assert compared["scale"] == pytest.approx(fit.parameters["scale"] * hr ** (-1.0 / fit.parameters["shape"]),
                                              rel=1e-12)
    with pytest.raises(ValueError, match="one arm"):
        fit_family(data.arm("control"), "weibull").hazard_keys("compared")


@pytest.mark.parametrize("family", ["weibull", "lognormal", "gengamma"])
def test_arm_hazards_carry_the_effect(data: SurvivalData, family: str) -> None:
    fit = fit_family(data, family)
    hazards = fit.arm_hazards()
    assert list(hazards) == ["control", "treated"]
    t = np.array([1.0, 5.0, 20.0, 60.0])
    ref, other = hazards["control"], hazards["treated"]
    if fit.effect.kind == "hazard_ratio":  # proportional hazards: H_1 = HR H_0 (Cox 1972, from memory)
        np.testing.assert_allclose(other.cumhazard(t), fit.effect.estimate * ref.cumhazard(t), rtol=1e-10)
    else:  # accelerated failure time: S_1(t) = S_0(t / AF) (common practice, no source)
        np.testing.assert_allclose(other.cumhazard(t), ref.cumhazard(t / fit.effect.estimate), rtol=1e-10)
    assert list(fit_family(data.arm("control"), family).arm_hazards()) == ["all"]

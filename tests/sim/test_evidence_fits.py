"""Maximum-likelihood survival fits (sim.evidence) against lifelines' parametric fitters and scipy.stats
``fit`` with ``CensoredData``, on a public data set (lifelines.datasets.load_rossi: Rossi, Berk & Lenihan
1980 recidivism data, as shipped by lifelines) and on simulated data.

Parameterisations are converted explicitly beside each check (lifelines: Weibull ``S = exp(-(t/lambda_)^rho_)``,
log-logistic ``S = 1/(1 + (t/alpha_)^beta_)``, exponential ``lambda_`` = mean = 1/rate, piecewise ``lambda_i_``
= 1/rate of band i; scipy: ``gompertz(c, scale)`` has ``H = c (exp(t/scale) - 1)``, so rate = c/scale and
shape = 1/scale).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats as st
from scipy import optimize

lifelines = pytest.importorskip("lifelines")
from lifelines import (ExponentialFitter, GeneralizedGammaFitter, LogLogisticAFTFitter,  # noqa: E402
                       LogLogisticFitter, LogNormalAFTFitter, LogNormalFitter, PiecewiseExponentialFitter,
                       SplineFitter, WeibullAFTFitter, WeibullFitter)
from lifelines.datasets import load_rossi  # noqa: E402

from sim.evidence import (SurvivalData, family_spec, fit_families, fit_family, fit_table,  # noqa: E402
                          fragment_text)
from sim.hazards import Gompertz, make_hazard  # noqa: E402
from sim.problems import ValidationError  # noqa: E402

from .conftest import two_state_text  # noqa: E402

RTOL = 1e-4  # the agreement for estimates and log-likelihoods


@pytest.fixture(scope="module")
def rossi() -> pd.DataFrame:
    return load_rossi()


@pytest.fixture(scope="module")
def rossi_data(rossi) -> SurvivalData:
    return SurvivalData.from_arrays(rossi.week, rossi.arrest, unit="weeks")


@pytest.fixture(scope="module")
def delayed(rossi) -> tuple[SurvivalData, np.ndarray]:
    """Rossi with invented delayed entry (a uniform share of each exit time, rounded down, seed 3)."""
    rng = np.random.default_rng(3)
    entry = np.floor(rng.uniform(0.0, 0.8, len(rossi)) * rossi.week.to_numpy())
    return SurvivalData.from_arrays(rossi.week, rossi.arrest, entry=entry, unit="weeks"), entry


LIFELINES = [
    ("exponential", ExponentialFitter, lambda f: [1.0 / f.lambda_]),
    ("weibull", WeibullFitter, lambda f: [f.rho_, f.lambda_]),
    ("loglogistic", LogLogisticFitter, lambda f: [f.beta_, f.alpha_]),
    ("lognormal", LogNormalFitter, lambda f: [f.mu_, f.sigma_]),
    # Cox et al. 2007 parameters: lifelines fits mu_, ln_sigma_ and lambda_ (= Q)
    ("gengamma", GeneralizedGammaFitter, lambda f: [f.mu_, math.exp(f.ln_sigma_), f.lambda_]),
]


@pytest.mark.parametrize("family, fitter, convert", LIFELINES, ids=[r[0] for r in LIFELINES])
def test_agrees_with_lifelines_on_rossi(rossi, rossi_data, family, fitter, convert):
    ours = fit_family(rossi_data, family)
    ref = fitter().fit(rossi.week, rossi.arrest)
    assert ours.converged, ours.message
    np.testing.assert_allclose(ours.estimates, convert(ref), rtol=RTOL)
    np.testing.assert_allclose(ours.loglik, ref.log_likelihood_, rtol=RTOL)
    assert ours.loglik >= ref.log_likelihood_ - 1e-6  # at least as good a maximum


# (the generalized gamma is left out here: on these data its Q is near 0, where the likelihood is flat in Q,
# lifelines warns that its variances are not to be trusted, and a relative tolerance on Q means little)
@pytest.mark.parametrize("family, fitter, convert", LIFELINES[:4], ids=[r[0] for r in LIFELINES[:4]])
def test_delayed_entry_agrees_with_lifelines(rossi, delayed, family, fitter, convert):
    """Left truncation: lifelines' ``entry=`` (the likelihood conditions on survival to entry)."""
    data, entry = delayed
    ours = fit_family(data, family)
    ref = fitter().fit(rossi.week, rossi.arrest, entry=entry)
    np.testing.assert_allclose(ours.estimates, convert(ref), rtol=RTOL)
    np.testing.assert_allclose(ours.loglik, ref.log_likelihood_, rtol=RTOL)


@pytest.mark.parametrize("family, fitter, names", [
    ("weibull", WeibullFitter, ["rho_", "lambda_"]),
    ("loglogistic", LogLogisticFitter, ["beta_", "alpha_"]),
    ("lognormal", LogNormalFitter, ["mu_", "sigma_"]),
])
def test_standard_errors_agree_with_lifelines(rossi, rossi_data, family, fitter, names):
    """Delta-method standard errors vs lifelines' (both from the observed information; finite
    differences here, automatic differentiation there: 1e-3); the parameters map one to one."""
    ours = fit_family(rossi_data, family)
    ref = fitter().fit(rossi.week, rossi.arrest)
    np.testing.assert_allclose(ours.standard_errors, ref.summary.loc[names, "se(coef)"].to_numpy(), rtol=1e-3)


def test_exponential_standard_error_by_the_delta_method(rossi, rossi_data):
    """lifelines reports lambda_ = 1/rate: se(1/rate) = se(rate) / rate^2 (delta method)."""
    ours = fit_family(rossi_data, "exponential")
    ref = ExponentialFitter().fit(rossi.week, rossi.arrest)
    rate, se = ours.estimates[0], ours.standard_errors[0]
    np.testing.assert_allclose(se / rate**2, ref.summary.loc["lambda_", "se(coef)"], rtol=1e-3)
    # observed information d / rate^2 at the maximum, so se = rate / sqrt(d) (closed form; common practice)
    np.testing.assert_allclose(se, rate / math.sqrt(rossi_data.n_events), rtol=1e-6)


def test_piecewise_agrees_with_lifelines(rossi, rossi_data, delayed):
    """Breaks between the integer weeks, so that both conventions for an event at a break agree."""
    breaks = [10.5, 20.5, 40.5]
    ours = fit_family(rossi_data, "piecewise", breaks=breaks)
    ref = PiecewiseExponentialFitter(breaks).fit(rossi.week, rossi.arrest)
    np.testing.assert_allclose(ours.parameters["rates"], 1.0 / ref.summary["coef"].to_numpy(), rtol=RTOL)
    np.testing.assert_allclose(ours.loglik, ref.log_likelihood_, rtol=RTOL)
    assert ours.parameters["breaks"] == (0.0, 10.5, 20.5, 40.5)
    data, entry = delayed
    ours = fit_family(data, "piecewise", breaks=[0.0, *breaks])
    ref = PiecewiseExponentialFitter(breaks).fit(rossi.week, rossi.arrest, entry=entry)
    np.testing.assert_allclose(ours.parameters["rates"], 1.0 / ref.summary["coef"].to_numpy(), rtol=RTOL)


def _tight(func, x0, args=(), disp=0):
    """scipy's default optimizer (Nelder-Mead) with tolerances below the comparison's 1e-4."""
    return optimize.fmin(func, x0, args=args, xtol=1e-10, ftol=1e-12, maxiter=100_000, maxfun=100_000, disp=0)


SCIPY = [
    ("weibull", st.weibull_min, lambda c, scale: [c, scale]),
    ("gamma", st.gamma, lambda a, scale: [a, scale]),
    ("loglogistic", st.fisk, lambda c, scale: [c, scale]),
    ("lognormal", st.lognorm, lambda s, scale: [math.log(scale), s]),
    ("gompertz", st.gompertz, lambda c, scale: [c / scale, 1.0 / scale]),
]


@pytest.mark.parametrize("family, dist, convert", SCIPY, ids=[r[0] for r in SCIPY])
def test_agrees_with_scipy_censored_fit(rossi, rossi_data, family, dist, convert):
    week, arrest = rossi.week.to_numpy(float), rossi.arrest.to_numpy().astype(bool)
    data = st.CensoredData(uncensored=week[arrest], right=week[~arrest])
    shape, loc, scale = dist.fit(data, floc=0, optimizer=_tight)
    ours = fit_family(rossi_data, family)
    np.testing.assert_allclose(ours.estimates, convert(shape, scale), rtol=RTOL)
    ll = np.sum(dist.logpdf(week[arrest], shape, 0, scale)) + np.sum(dist.logsf(week[~arrest], shape, 0, scale))
    np.testing.assert_allclose(ours.loglik, ll, rtol=RTOL)


def test_simulated_gompertz_agrees_with_scipy():
    """Simulated from the project's Gompertz (rate 0.05, shape 0.1 per year), censored uniformly."""
    rng = np.random.default_rng(11)
    t = Gompertz(rate=0.05, shape=0.1).rvs(400, rng)
    c = rng.uniform(0.0, 25.0, 400)
    time, event = np.minimum(t, c), t <= c
    ours = fit_family(SurvivalData.from_arrays(time, event), "gompertz")
    shape, _, scale = st.gompertz.fit(st.CensoredData(uncensored=time[event], right=time[~event]), floc=0,
                                      optimizer=_tight)
    np.testing.assert_allclose(ours.estimates, [shape / scale, 1.0 / scale], rtol=RTOL)


def test_spline_agrees_with_lifelines(rossi, rossi_data):
    """Royston-Parmar spline with 2 interior knots vs lifelines' SplineFitter (the same restricted cubic
    basis on log time, Royston & Parmar 2002): the log-likelihood at 1e-4 and both fits' values at the
    knots lifelines is given; lifelines starts from the Weibull values (not from ours)."""
    spec = family_spec("spline", knots=2, data=rossi_data)
    ours = fit_family(rossi_data, spec)
    assert ours.converged, ours.message
    knots = np.exp(dict(spec.extra)["log_time_knots"])
    w = WeibullFitter().fit(rossi.week, rossi.arrest)
    ref = SplineFitter(knots).fit(rossi.week, rossi.arrest,
                                  initial_point=np.array([-w.rho_ * math.log(w.lambda_), w.rho_, 0.0, 0.0]))
    np.testing.assert_allclose(ours.loglik, ref.log_likelihood_, rtol=RTOL)
    assert ours.loglik >= ref.log_likelihood_ - 1e-6
    grid = np.array([5.0, 20.0, 40.0, 52.0])
    np.testing.assert_allclose(ours.hazard().sf(grid), ref.survival_function_at_times(grid).to_numpy(), atol=1e-3)


# ---- two arms -----------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def two_arms(rossi) -> SurvivalData:
    return SurvivalData.from_arrays(rossi.week, rossi.arrest, group=rossi.fin, unit="weeks")


def test_exponential_hazard_ratio_closed_form(two_arms):
    """Exponential with two arms: HR = (d1/T1)/(d0/T0), var(log HR) = 1/d0 + 1/d1 (maximum likelihood
    for the exponential; common practice, no source)."""
    fit = fit_family(two_arms, "exponential")
    a, b = two_arms.arm("0"), two_arms.arm("1")
    hr = (b.n_events / b.time.sum()) / (a.n_events / a.time.sum())
    se = math.sqrt(1.0 / a.n_events + 1.0 / b.n_events)
    assert fit.effect.kind == "hazard_ratio" and (fit.effect.reference, fit.effect.compared) == ("0", "1")
    np.testing.assert_allclose(fit.effect.estimate, hr, rtol=RTOL)
    np.testing.assert_allclose(fit.effect.log_se, se, rtol=1e-3)
    np.testing.assert_allclose([fit.effect.lower, fit.effect.upper],
                               [hr * math.exp(-st.norm.ppf(0.975) * se), hr * math.exp(st.norm.ppf(0.975) * se)],
                               rtol=1e-3)


@pytest.mark.parametrize("family, fitter, effect", [
    # lifelines AFT: log lambda_ = b0 + b1 fin; our PH Weibull: HR = exp(-b1 rho)
    ("weibull", WeibullAFTFitter, lambda f: math.exp(-f.params_[("lambda_", "fin")] * math.exp(f.params_[("rho_", "Intercept")]))),
    ("loglogistic", LogLogisticAFTFitter, lambda f: math.exp(f.params_[("alpha_", "fin")])),
    ("lognormal", LogNormalAFTFitter, lambda f: math.exp(f.params_[("mu_", "fin")])),
])
def test_two_arm_effects_agree_with_lifelines_aft(rossi, two_arms, family, fitter, effect):
    ours = fit_family(two_arms, family)
    ref = fitter().fit(rossi[["week", "arrest", "fin"]], "week", "arrest")
    np.testing.assert_allclose(ours.effect.estimate, effect(ref), rtol=RTOL)
    np.testing.assert_allclose(ours.loglik, ref.log_likelihood_, rtol=RTOL)


def test_effect_kind_by_family(two_arms):
    kinds = {f.family: f.effect.kind for f in fit_families(two_arms, ("gompertz", "gamma"))}
    assert kinds == {"gompertz": "hazard_ratio", "gamma": "acceleration_factor"}


# ---- results, table, fragment ----------------------------------------------------------------------

def test_aic_bic_and_table(rossi_data):
    fits = fit_families(rossi_data, ("exponential", "weibull"))
    for f in fits:
        assert f.aic == pytest.approx(2 * f.k - 2 * f.loglik)
        assert f.bic == pytest.approx(f.k * math.log(432) - 2 * f.loglik)
    table = fit_table(fits)
    assert list(table["family"]) == sorted(["exponential", "weibull"], key=lambda n: next(
        f.aic for f in fits if f.family == n))
    assert table["dAIC"].min() == 0.0


def test_non_convergence_is_reported_not_nan():
    """Both events at one time after all censorings: the Weibull shape runs off to infinity and the
    log-normal sigma to 0 (no maximum inside the families); the fits say so."""
    data = SurvivalData.from_arrays([1.0, 2.0, 5.0, 5.0], [0, 0, 1, 1])
    for family in ("weibull", "lognormal"):
        fit = fit_family(data, family)
        assert not fit.converged
        assert "did not converge" in fit.message or "not positive definite" in fit.message
        assert fit.covariance is None and np.all(np.isnan(fit.standard_errors))
    assert fit_family(data, "exponential").converged
    assert np.all(np.isfinite(fit.estimates)) and math.isfinite(fit.loglik)
    tomllib = pytest.importorskip("tomllib")
    written = tomllib.loads(fragment_text([fit]))
    assert "chosen" not in written and "fits" not in written
    assert "did not converge" in written["not_written"]["lognormal"]


def _load_pasted_fragment(tmp_path, hazard_keys: str, more_tables: str = ""):
    """A fit fragment's hazard keys pasted into the death transition of a two-state scenario (alive ->
    dead, everyone entering at 50, 10 years), with ``more_tables`` after it: the scenario as read back."""
    from sim.io import load_scenario

    text = f"format_version = 1\n{two_state_text(hazard_keys)}{more_tables}"
    path = tmp_path / "s.toml"
    path.write_text(text)
    return load_scenario(path)


def test_fragment_keys_read_back_by_the_scenario_reader(tmp_path, rossi_data):
    """The [chosen] keys pasted into a transition give the fitted hazard (months -> years by the reader)."""
    tomllib = pytest.importorskip("tomllib")
    fit = fit_family(SurvivalData.from_arrays(rossi_data.time / 4.0, rossi_data.event, unit="months"), "weibull")
    chosen = tomllib.loads(fragment_text([fit]))["chosen"]
    assert chosen == {"family": "weibull", "unit": "months", **fit.parameters}
    keys = "\n".join(f"{k} = {v!r}" if not isinstance(v, str) else f'{k} = "{v}"' for k, v in chosen.items())
    hazard = _load_pasted_fragment(tmp_path, keys).model.transitions[0].hazard
    expected = make_hazard("weibull", shape=fit.parameters["shape"], scale=fit.parameters["scale"] / 12.0)
    grid = np.array([0.5, 1.0, 3.0])
    np.testing.assert_allclose(hazard.cumhazard(grid), expected.cumhazard(grid), rtol=1e-12)


def test_bad_fit_requests_name_the_parameter(rossi_data, two_arms):
    with pytest.raises(ValidationError) as err:
        fit_family(rossi_data, "piecewise")
    assert err.value.problem.path == ("breaks",)
    with pytest.raises(ValidationError) as err:
        fit_family(rossi_data, "piecewise", breaks=[0, 20, 10])
    assert err.value.problem.path == ("breaks", 2) and err.value.problem.value == 10
    with pytest.raises(ValidationError) as err:
        fit_families(rossi_data, ("weibull", "cauchy"))
    assert err.value.problem.value == "cauchy"
    with pytest.raises(ValidationError) as err:
        fit_family(rossi_data, "spline", knots=4)
    assert err.value.problem.path == ("knots",)
    with pytest.raises(ValidationError) as err:
        fit_family(rossi_data, "weibull", arms=True)
    assert err.value.problem.path == ("group",)


@pytest.mark.parametrize("family", ["exponential", "weibull", "gompertz", "loglogistic", "lognormal", "gamma",
                                    "piecewise"])
def test_compared_arm_hazard_in_the_same_family(two_arms, family):
    """The compared arm's parameters reproduce the effect: H_1 = HR H_0 (proportional hazards) or
    H_1(t) = H_0(t / AF) (accelerated failure time), by the families' own cumulative hazards."""
    fit = fit_family(two_arms, family, breaks=[10.5, 30.5] if family == "piecewise" else None)
    h0 = fit.hazard()
    h1 = make_hazard(family, **fit.compared_parameters())
    t = np.array([1.0, 10.0, 30.0, 52.0])
    if fit.effect.kind == "hazard_ratio":
        np.testing.assert_allclose(h1.cumhazard(t), fit.effect.estimate * h0.cumhazard(t), rtol=1e-12)
    else:
        np.testing.assert_allclose(h1.cumhazard(t), h0.cumhazard(t / fit.effect.estimate), rtol=1e-10)
    assert tomllib_loads(fragment_text([fit]))["fits"][family]["compared_arm"]["family"] == family


def tomllib_loads(text: str) -> dict:
    return pytest.importorskip("tomllib").loads(text)


@pytest.mark.parametrize("family, breaks", [("weibull", None), ("piecewise", [0.0, 20.5])])
def test_fragment_uncertainty_is_accepted_by_the_scenario_reader(tmp_path, two_arms, family, breaks):
    """A two-arm fit pasted into a scenario: the reference arm's keys in the transition, the hazard ratio
    in the second strategy, and the fit's [uncertainty] table (names prefixed with their key paths) as an
    [[uncertainty]] entry: the reader accepts it, and the group's mean on its log scale gives back the
    estimates (e^mean = the fitted values; the covariance is the inverse observed information, so the
    reported covariance is J C J' with J = diag(e^mean): the delta method)."""
    tomllib = pytest.importorskip("tomllib")
    fit = fit_family(two_arms, family, breaks=breaks)
    doc = tomllib.loads(fragment_text([fit]))["fits"][family]
    unc = doc["uncertainty"]
    prefix = {n: f"transitions[0].{n}" for n in fit.spec.names}
    prefix["hazard_ratio"] = "strategies[1].hazard_ratios.death"
    names = [prefix[n] for n in unc["parameters"]]
    np.testing.assert_allclose(np.exp(unc["mean"]), fit.estimates[:-1].tolist() + [fit.effect.estimate], rtol=1e-12)
    jac = np.diag(np.exp(unc["mean"][:-1]))
    np.testing.assert_allclose(jac @ np.array(unc["covariance"])[:-1, :-1] @ jac, fit.covariance[:-1, :-1],
                               rtol=1e-10, atol=1e-300)

    def toml(v):
        return f'"{v}"' if isinstance(v, str) else repr(v)

    hazard = "\n".join(f"{k} = {toml(v)}" for k, v in doc.items() if k not in ("compared_arm", "uncertainty",
                                                                               "statistics"))
    scenario = _load_pasted_fragment(tmp_path, hazard, f"""[[strategies]]
name = "arm 0"
[[strategies]]
name = "arm 1"
hazard_ratios = {{ death = {fit.effect.estimate!r} }}
[[uncertainty]]
parameters = {toml(names).replace("'", '"')}
distribution = "multivariate_normal"
mean = {unc["mean"]!r}
covariance = {unc["covariance"]!r}
transform = {toml(unc["transform"]).replace("'", '"')}
""")
    assert len(scenario.uncertainty) == 1

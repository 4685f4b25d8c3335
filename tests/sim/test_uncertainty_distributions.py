"""Distributions of uncertain inputs against scipy.stats (the independent reference for every
density, quantile, mean and variance), method-of-moments fits against the mean and standard error
they were asked for (Briggs, Claxton & Sculpher 2006, Decision Modelling for Health Economic
Evaluation, ch. 4), and the draws: sample means within 4 Monte Carlo standard errors, Dirichlet rows
summing to 1, a multivariate normal's sample covariance within 4 of its standard errors, and draw i
the same whatever the number of draws, the first draw or the other inputs."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from sim.problems import ValidationError
from sim.uncertainty import (Beta, Dirichlet, DistributionError, Gamma, LogNormal, MultivariateNormal, Normal,
                             Triangular, UncertainInput, Uniform, beta_from_mean_se, dirichlet_from_shares,
                             draw_table, gamma_from_mean_se, group_uniforms, lognormal_from_interval,
                             lognormal_from_mean_se, mvn_from_correlation, normal_from_mean_se)

# each family with scipy.stats' frozen equivalent (parameterisations in sim/uncertainty/distributions.py)
CASES = [
    (Beta(2.5, 7.0), stats.beta(2.5, 7.0)),
    (Beta(0.4, 0.6), stats.beta(0.4, 0.6)),  # U-shaped
    (Beta(258.0, 42.0), stats.beta(258.0, 42.0)),
    (Gamma(3.0, 0.02), stats.gamma(3.0, scale=0.02)),
    (Gamma(0.5, 1000.0), stats.gamma(0.5, scale=1000.0)),
    (LogNormal(-0.37, 0.14), stats.lognorm(0.14, scale=math.exp(-0.37))),
    (Normal(0.5, 0.2), stats.norm(0.5, 0.2)),
    (Normal(0.1, 0.05, 0.0, math.inf), stats.truncnorm(-2.0, math.inf, loc=0.1, scale=0.05)),
    (Normal(0.0, 1.0, 3.0, 6.0), stats.truncnorm(3.0, 6.0, loc=0.0, scale=1.0)),  # far in the upper tail
    (Normal(2.0, 1.0, -math.inf, -5.0), stats.truncnorm(-math.inf, -7.0, loc=2.0, scale=1.0)),  # lower tail
    (Uniform(50.0, 150.0), stats.uniform(50.0, 100.0)),
    (Triangular(1200.0, 2000.0, 3500.0), stats.triang(800.0 / 2300.0, loc=1200.0, scale=2300.0)),
    (Triangular(0.0, 0.0, 2.0), stats.triang(0.0, loc=0.0, scale=2.0)),
    (Triangular(0.0, 2.0, 2.0), stats.triang(1.0, loc=0.0, scale=2.0)),
]
IDS = [d.describe() for d, _ in CASES]
U = np.array([1e-12, 1e-6, 0.001, 0.025, 0.2, 0.5, 0.8, 0.975, 0.999, 1 - 1e-6])


@pytest.mark.parametrize("dist, ref", CASES, ids=IDS)
def test_quantiles_densities_mean_and_interval_agree_with_scipy(dist, ref) -> None:
    # relative 1e-9; absolute a few units in the last place of the location (x = m + sd z cancels
    # near a truncation point at 0)
    np.testing.assert_allclose(dist.ppf(U), ref.ppf(U), rtol=1e-9, atol=1e-14 * (abs(ref.mean()) + ref.std()))
    x = ref.ppf(np.linspace(0.01, 0.99, 41))
    np.testing.assert_allclose(dist.pdf(x), ref.pdf(x), rtol=1e-9)
    outside = [dist.support[0] - 1.0, dist.support[1] + 1.0]
    assert np.all(dist.pdf(np.array(outside)) == 0.0)
    assert dist.mean == pytest.approx(ref.mean(), rel=1e-10)
    np.testing.assert_allclose(dist.interval(), ref.interval(0.95), rtol=1e-9)
    lo, hi = dist.support
    assert np.all((dist.ppf(U) >= lo) & (dist.ppf(U) <= hi))


@pytest.mark.parametrize("fit, ref, mean, se", [
    (beta_from_mean_se, stats.beta, 0.86, 0.02),
    (beta_from_mean_se, stats.beta, 0.3, 0.2),
    (gamma_from_mean_se, stats.gamma, 1500.0, 200.0),
    (gamma_from_mean_se, stats.gamma, 0.08, 0.012),
    (lognormal_from_mean_se, stats.lognorm, 0.65, 0.09),
    (lognormal_from_mean_se, stats.lognorm, 3e-5, 3e-6),
    (normal_from_mean_se, stats.norm, -120.0, 45.0),
])
def test_method_of_moments_reproduces_the_stated_mean_and_standard_error(fit, ref, mean, se) -> None:
    # Briggs, Claxton & Sculpher 2006, ch. 4: the fitted distribution has the stated mean and SE;
    # scipy.stats computes them from the fitted parameters independently
    d = fit(mean, se)
    frozen = {"beta": lambda: ref(d.alpha, d.beta), "gamma": lambda: ref(d.shape, scale=d.scale),
              "lognormal": lambda: ref(d.sigma, scale=math.exp(d.mu)),
              "normal": lambda: ref(d.location, d.sd)}[d.family]()
    assert frozen.mean() == pytest.approx(mean, rel=1e-12)
    assert frozen.std() == pytest.approx(se, rel=1e-10)


def test_method_of_moments_beta_worked_example() -> None:
    # Briggs et al. 2006, ch. 4 (from memory): mean 0.86 and SE 0.02 give alpha + beta =
    # 0.86 * 0.14 / 0.0004 - 1 = 300, so alpha = 258, beta = 42
    d = beta_from_mean_se(0.86, 0.02)
    assert d.alpha == pytest.approx(258.0, rel=1e-12) and d.beta == pytest.approx(42.0, rel=1e-12)


@pytest.mark.parametrize("call, key, words", [
    (lambda: beta_from_mean_se(0.9, 0.31), ("se",), "sqrt(mean (1 - mean)) = 0.3"),
    (lambda: beta_from_mean_se(1.2, 0.1), ("mean",), "strictly between 0 and 1"),
    (lambda: gamma_from_mean_se(-5.0, 1.0), ("mean",), "> 0"),
    (lambda: lognormal_from_mean_se(0.0, 1.0), ("mean",), "> 0"),
    (lambda: gamma_from_mean_se(5.0, 0.0), ("se",), "> 0"),
    (lambda: Beta(-1.0, 2.0), ("alpha",), "> 0"),
    (lambda: Gamma(2.0, math.nan), ("scale",), "finite"),
    (lambda: LogNormal(0.0, True), ("sigma",), "a number"),
    (lambda: Normal(0.0, 1.0, 2.0, 1.0), ("high",), "> low"),
    (lambda: Normal(0.0, 1.0, 40.0, 50.0), ("low",), "holds no probability"),
    (lambda: Uniform(3.0, 3.0), ("high",), "> low"),
    (lambda: Triangular(0.0, 5.0, 2.0), ("mode",), "between low"),
    (lambda: Dirichlet((1.0,)), ("alpha",), "at least 2"),
    (lambda: Dirichlet((1.0, 0.0)), ("alpha", 1), "> 0"),
    (lambda: dirichlet_from_shares([0.7, 0.2], 100), ("mean",), "sum to 1"),
    (lambda: MultivariateNormal((0.0, 0.0), ((1.0, 2.0), (2.0, 1.0))), ("covariance",), "positive semi-definite"),
    (lambda: MultivariateNormal((0.0, 0.0), ((1.0, 0.5), (0.4, 1.0))), ("covariance", 0, 1), "symmetric"),
    (lambda: MultivariateNormal((0.0, 0.0), ((1.0, 0.0), (0.0, 1.0)), ("log", "exp")), ("transform", 1), "one of"),
    (lambda: MultivariateNormal((0.0, 0.0), ((1.0, 0.0, 0.0), (0.0, 1.0, 0.0))), ("covariance",), "2 x 2"),
    (lambda: lognormal_from_interval([0.9, 0.5]), ("interval", 1), "> the interval's low end"),
    (lambda: lognormal_from_interval([0.0, 0.5]), ("interval", 0), "> 0"),
    (lambda: mvn_from_correlation([0, 0], [1, 1], [[1, 0.5], [0.5, 0.9]]), ("correlation", 1, 1), "unit diagonal"),
    (lambda: mvn_from_correlation([0, 0], [1, 1], [[1, 1.5], [1.5, 1]]), ("correlation", 0, 1), "between -1 and 1"),
    (lambda: mvn_from_correlation([0, 0, 0], [1, 1, 1], [[1, 0.9, -0.9], [0.9, 1, 0.9], [-0.9, 0.9, 1]]),
     ("correlation",), "positive semi-definite"),
    (lambda: mvn_from_correlation([0, 0], [1], [[1, 0], [0, 1]]), ("se",), "2 standard errors"),
])
def test_impossible_parameters_name_the_key_the_value_and_the_rule(call, key, words) -> None:
    with pytest.raises(DistributionError) as err:
        call()
    problem = err.value.problem
    assert problem.path == key and words in problem.rule and problem.has_value


def test_log_normal_from_a_95_percent_interval_reproduces_it() -> None:
    # a hazard ratio 0.70 (0.55 to 0.89) read as symmetric on the log scale (common practice, no
    # source): scipy.stats.lognorm's 95% interval of the fit is the stated one, its median sqrt(l h)
    d = lognormal_from_interval([0.55, 0.89])
    ref = stats.lognorm(d.sigma, scale=math.exp(d.mu))
    np.testing.assert_allclose(ref.interval(0.95), (0.55, 0.89), rtol=1e-12)
    assert ref.median() == pytest.approx(math.sqrt(0.55 * 0.89), rel=1e-12)


def test_multivariate_normal_from_standard_errors_and_a_correlation_matrix() -> None:
    se, r = np.array([0.06, 0.1, 0.2]), np.array([[1.0, -0.3, 0.1], [-0.3, 1.0, 0.0], [0.1, 0.0, 1.0]])
    d = mvn_from_correlation([0.26, 3.4, 0.0], se, r.tolist(), ("log", "log", "identity"))
    cov = np.array(d.covariance)
    np.testing.assert_allclose(cov, r * np.outer(se, se), rtol=1e-15)
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), se, rtol=1e-15)  # the stated standard errors
    assert d.transforms == ("log", "log", "identity")


def test_dirichlet_from_mean_shares_and_a_sample_size() -> None:
    # alpha_k = m_k n (Briggs et al. 2006, ch. 4): the means are the stated shares, and each share's
    # variance is m (1 - m) / (n + 1), that of a Beta(m n, (1 - m) n) (scipy.stats.dirichlet)
    d = dirichlet_from_shares([0.7, 0.2, 0.1], 200)
    ref = stats.dirichlet(d.alpha)
    np.testing.assert_allclose(ref.mean(), [0.7, 0.2, 0.1], rtol=1e-14)
    np.testing.assert_allclose(ref.var(), np.array([0.7, 0.2, 0.1]) * [0.3, 0.8, 0.9] / 201, rtol=1e-12)


def test_dirichlet_marginals_are_betas_and_match_scipy() -> None:
    d = Dirichlet((140.0, 60.0, 5.0))
    ref = stats.dirichlet(d.alpha)
    np.testing.assert_allclose(d.means(), ref.mean(), rtol=1e-12)
    for i in range(3):  # each share alone is Beta(alpha_i, alpha_0 - alpha_i)
        m = d.marginal(i)
        assert m.mean == pytest.approx(ref.mean()[i], rel=1e-12)
        assert stats.beta(m.alpha, m.beta).var() == pytest.approx(ref.var()[i], rel=1e-10)


def _spec(keys, dist) -> UncertainInput:
    return UncertainInput(tuple(keys), dist)


@pytest.mark.parametrize("dist, ref", CASES, ids=IDS)
def test_sample_means_within_four_monte_carlo_standard_errors(dist, ref) -> None:
    n = 20_000
    x = draw_table([_spec(["p"], dist)], n, seed=2026)["p"].to_numpy()
    assert abs(x.mean() - ref.mean()) <= 4 * ref.std() / math.sqrt(n)
    lo, hi = dist.support
    assert np.all((x >= lo) & (x <= hi))


def test_dirichlet_draws_sum_to_one_with_the_means_within_four_mcse() -> None:
    d = Dirichlet((14.0, 6.0, 2.5))
    n = 20_000
    x = draw_table([_spec(["a", "b", "c"], d)], n, seed=5).to_numpy()
    np.testing.assert_allclose(x.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    ref = stats.dirichlet(d.alpha)
    assert np.all(np.abs(x.mean(axis=0) - ref.mean()) <= 4 * np.sqrt(ref.var() / n))


def test_multivariate_normal_sample_covariance_within_its_standard_error() -> None:
    # For n normal draws the sample covariance S_ij has variance (s_ii s_jj + s_ij^2) / n to first
    # order (the Wishart distribution's variance, Anderson 2003, An Introduction to Multivariate
    # Statistical Analysis, from memory); each element must lie within 4 of those standard errors.
    cov = np.array([[0.0225, 0.006, -0.01], [0.006, 0.04, 0.0], [-0.01, 0.0, 0.09]])
    mean = np.array([-2.12, -1.39, 0.5])
    d = MultivariateNormal(tuple(mean), tuple(map(tuple, cov)))
    n = 40_000
    x = draw_table([_spec(["a", "b", "c"], d)], n, seed=99).to_numpy()
    se_cov = np.sqrt((np.outer(np.diag(cov), np.diag(cov)) + cov ** 2) / n)
    assert np.all(np.abs(np.cov(x, rowvar=False) - cov) <= 4 * se_cov)
    assert np.all(np.abs(x.mean(axis=0) - mean) <= 4 * np.sqrt(np.diag(cov) / n))
    # scipy's multivariate normal agrees on the marginal quantiles of the draws' distribution
    ref = stats.multivariate_normal(mean, cov)
    assert ref.cov == pytest.approx(np.array(d.covariance))


def test_multivariate_normal_on_the_log_and_logit_scales() -> None:
    cov = ((0.04, 0.01), (0.01, 0.25))
    d = MultivariateNormal((math.log(0.12), 0.3), cov, ("log", "logit"))
    n = 40_000
    x = draw_table([_spec(["rate", "share"], d)], n, seed=3).to_numpy()
    assert np.all(x[:, 0] > 0) and np.all((x[:, 1] > 0) & (x[:, 1] < 1))
    # log element: log-normal, mean exp(m + v/2) (scipy.stats.lognorm); logit element: E[expit(Z)]
    # by scipy.integrate.quad against the normal density
    ref_rate = stats.lognorm(0.2, scale=0.12)
    assert d.means()[0] == pytest.approx(ref_rate.mean(), rel=1e-12)
    from scipy import integrate, special
    logit_mean = integrate.quad(lambda z: special.expit(z) * stats.norm.pdf(z, 0.3, 0.5), -np.inf, np.inf)[0]
    assert d.means()[1] == pytest.approx(logit_mean, rel=1e-9)
    assert abs(x[:, 0].mean() - ref_rate.mean()) <= 4 * ref_rate.std() / math.sqrt(n)
    assert abs(x[:, 1].mean() - logit_mean) <= 4 * x[:, 1].std() / math.sqrt(n)
    np.testing.assert_allclose(d.intervals()[0], ref_rate.interval(0.95), rtol=1e-9)


def test_a_semidefinite_covariance_is_accepted_and_factored() -> None:
    cov = ((1.0, 1.0), (1.0, 1.0))  # perfectly correlated: singular, positive semi-definite
    d = MultivariateNormal((0.0, 1.0), cov)
    np.testing.assert_allclose(d.factor @ d.factor.T, np.array(cov), atol=1e-12)
    x = draw_table([_spec(["a", "b"], d)], 100, seed=1).to_numpy()
    np.testing.assert_allclose(x[:, 1] - x[:, 0], 1.0, atol=1e-12)


SPECS = [
    _spec(["u"], Beta(258.0, 42.0)),
    _spec(["s1", "s2", "s3"], Dirichlet((2.0, 3.0, 5.0))),
    _spec(["x", "y", "z", "w", "v"], MultivariateNormal((0.0,) * 5, tuple(
        tuple(1.0 if i == j else 0.3 for j in range(5)) for i in range(5)))),  # 5 elements: two counter blocks
    _spec(["t"], Triangular(0.0, 1.0, 3.0)),
]


def test_draw_i_is_the_same_whatever_the_number_of_draws_the_start_or_the_other_inputs() -> None:
    whole = draw_table(SPECS, 300, seed=14)
    assert whole.index.name == "draw" and list(whole.index) == list(range(300))
    assert list(whole.columns) == ["u", "s1", "s2", "s3", "x", "y", "z", "w", "v", "t"]
    assert all(whole.dtypes == np.float64)
    chunks = [draw_table(SPECS, n, seed=14, start=s) for s, n in ((0, 7), (7, 93), (100, 1), (101, 199))]
    assert all(c.index[0] == s for c, s in zip(chunks, (0, 7, 100, 101)))
    import pandas as pd
    pd.testing.assert_frame_equal(pd.concat(chunks), whole)
    longer = draw_table(SPECS, 1000, seed=14)
    pd.testing.assert_frame_equal(longer.iloc[:300], whole)
    # reordered and with an extra input: each group's draws are unchanged (keyed by its names)
    other = draw_table([_spec(["extra"], Gamma(2.0, 1.0)), *reversed(SPECS)], 300, seed=14)
    pd.testing.assert_frame_equal(other[whole.columns], whole)
    # another seed, other draws
    assert not np.allclose(draw_table(SPECS, 300, seed=15).to_numpy(), whole.to_numpy())


def test_uniforms_lie_strictly_inside_the_unit_interval() -> None:
    u = group_uniforms(seed=0, names=("a",), size=9, start=2**40, n=5000)
    assert u.shape == (5000, 9) and np.all((u > 0) & (u < 1))
    assert np.array_equal(u[10:20], group_uniforms(0, ("a",), 9, 2**40 + 10, 10))


def test_draw_table_refuses_a_parameter_drawn_twice_and_bad_counts() -> None:
    with pytest.raises(ValidationError, match="already drawn"):
        draw_table([_spec(["a"], Beta(1.0, 1.0)), _spec(["a"], Gamma(1.0, 1.0))], 5, 1)
    for kwargs in ({"n_draws": -1}, {"seed": 1.5}, {"start": True}):
        with pytest.raises(ValidationError):
            draw_table(SPECS, **{"n_draws": 5, "seed": 1, **kwargs})
    assert draw_table(SPECS, 0, 1).shape == (0, 10)
    with pytest.raises(ValidationError, match="name as many parameters"):
        UncertainInput(("a",), Dirichlet((1.0, 2.0)))

"""Patient-level noise in a simulated PSA (sim.uncertainty.noise_share), on synthetic draws with known
between-draw and within-draw variances (one-way random-effects ANOVA: O'Hagan, Stevenson & Madan
2007, Health Econ 16:1009-1023)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sim.problems import ValidationError
from sim.uncertainty import incremental_draws, noise_share, patients_for_noise_share

TAU2, SIGMA2, PATIENTS, DRAWS = 4.0, 100.0, 50, 2000


def simulated_draws(seed: int = 31) -> pd.DataFrame:
    """Draw j: μ_j ~ N(10, τ²); its patients y_jk = μ_j + N(0, σ_w²); the table keeps each draw's
    mean, MCSE = s_j/sqrt(n) and n, as a simulated PSA does."""
    rng = np.random.default_rng(seed)
    mu = rng.normal(10.0, np.sqrt(TAU2), DRAWS)
    y = mu[:, None] + rng.normal(0.0, np.sqrt(SIGMA2), (DRAWS, PATIENTS))
    return pd.DataFrame({"draw": np.arange(DRAWS), "strategy": "s", "qalys_discounted": y.mean(axis=1),
                         "qalys_discounted_mcse": y.std(axis=1, ddof=1) / np.sqrt(PATIENTS),
                         "patients": PATIENTS})


def test_anova_recovers_the_between_and_within_variances_within_4_se():
    out = noise_share(simulated_draws(), "qalys_discounted").iloc[0]
    assert abs(out.parameter_variance - TAU2) <= 4 * out.parameter_variance_se
    assert abs(out.within_variance - SIGMA2) <= 4 * out.within_variance_se
    assert abs(out.noise_variance - SIGMA2 / PATIENTS) <= 4 * out.noise_variance_se
    assert abs(out.total_variance - (TAU2 + SIGMA2 / PATIENTS)) <= 4 * out.total_variance_se
    # the distribution-free standard error of the total variance agrees with the normal-theory one,
    # sqrt(2 V² / (N - 1)) (chi-square distribution of s²), within 4 of its own relative errors: it
    # rests on the fourth moment m4 = 3 V², estimated with relative SE sqrt(E z^8 - (E z^4)²)/(3 sqrt N)
    # = sqrt(96/N)/3; m4 - V² = 2 V² moves 3/2 as much and its square root half of that (first order)
    v = TAU2 + SIGMA2 / PATIENTS
    rel_se = 0.75 * np.sqrt(96 / DRAWS) / 3
    assert out.total_variance_se == pytest.approx(np.sqrt(2 * v * v / (DRAWS - 1)), rel=4 * rel_se)
    assert out.noise_share == pytest.approx(out.noise_variance / out.total_variance, rel=1e-12)


def test_patients_for_a_target_share_solves_the_share_equation():
    # share(n) = (σ²/n) / (τ² + σ²/n) = s  <=>  n = σ² (1 - s) / (s τ²)  (O'Hagan et al. 2007)
    n = patients_for_noise_share(SIGMA2, TAU2, 0.05)
    assert (SIGMA2 / n) / (TAU2 + SIGMA2 / n) == pytest.approx(0.05, rel=1e-12)
    assert n == pytest.approx(475.0, rel=1e-12)  # 100 * 0.95 / (0.05 * 4), by hand
    assert patients_for_noise_share(SIGMA2, -1.0, 0.05) == np.inf
    out = noise_share(simulated_draws(), "qalys_discounted", target_share=0.05).iloc[0]
    assert out.patients_for_target == pytest.approx(
        out.within_variance * 0.95 / (0.05 * out.parameter_variance), rel=1e-12)
    with pytest.raises(ValidationError) as err:
        noise_share(simulated_draws(), "qalys_discounted", target_share=1.0)
    assert err.value.problem.path == ("target_share",)


def test_increments_use_paired_errors_when_given_else_the_independent_bound():
    base = simulated_draws(1).assign(strategy="old")
    new = simulated_draws(2).assign(strategy="new")
    table = pd.concat([base, new], ignore_index=True)
    inc = incremental_draws(table, "old", ["qalys_discounted"])
    assert (inc["mcse_kind"] == "unpaired").all()
    assert np.allclose(inc["qalys_discounted"], new["qalys_discounted"] - base["qalys_discounted"], rtol=0, atol=1e-12)
    assert np.allclose(inc["qalys_discounted_mcse"],
                       np.hypot(new["qalys_discounted_mcse"], base["qalys_discounted_mcse"]), rtol=1e-12)
    paired = table.assign(qalys_discounted_mcse_paired=np.where(table.strategy == "new", 0.1, np.nan))
    inc = incremental_draws(paired.fillna({"qalys_discounted_mcse_paired": 0.0}), "old", ["qalys_discounted"])
    assert (inc["mcse_kind"] == "paired").all() and (inc["qalys_discounted_mcse"] == 0.1).all()
    # the independent increments: parameter variance 2 τ², within variance 2 σ² (sum of independents)
    out = noise_share(incremental_draws(table, "old", ["qalys_discounted"]), "qalys_discounted").iloc[0]
    assert abs(out.parameter_variance - 2 * TAU2) <= 4 * out.parameter_variance_se
    assert abs(out.within_variance - 2 * SIGMA2) <= 4 * out.within_variance_se


def test_noise_share_names_a_missing_column():
    with pytest.raises(ValidationError) as err:
        noise_share(simulated_draws().drop(columns="patients"), "qalys_discounted")
    assert err.value.problem.path == ("per_draw", "patients")


def test_noise_share_refuses_a_table_of_several_methods():
    table = pd.concat([simulated_draws().assign(method="simulated"), simulated_draws().assign(method="exact")])
    with pytest.raises(ValidationError) as err:
        noise_share(table, "qalys_discounted")
    assert err.value.problem.path == ("per_draw", "method")

"""Kaplan-Meier with delayed entry (sim.evidence.kaplan_meier) against lifelines' KaplanMeierFitter:
survival, the log(-log) confidence interval (lifelines' ``confidence_interval_``, Kalbfleisch &
Prentice 1980) and the numbers at risk, to 1e-10, on a public data set (lifelines.datasets.load_rossi:
Rossi, Berk & Lenihan 1980, tied weekly times) and on simulated left-truncated data.

lifelines counts a patient entering at t in the risk set at t; sim.evidence does not (entry < t <= exit).
The two agree whenever no entry time equals an exit time; with such ties, lifelines is given the entries
nudged just above (by less than the smallest gap between distinct times), which is the same risk set.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

lifelines = pytest.importorskip("lifelines")
from lifelines import KaplanMeierFitter  # noqa: E402
from lifelines.datasets import load_rossi  # noqa: E402

from sim.analysis import kaplan_meier as cohort_kaplan_meier  # noqa: E402
from sim.evidence import (SurvivalData, SurvivalDataError, kaplan_meier, kaplan_meier_by_arm,  # noqa: E402
                          numbers_at_risk)

TOL = 1e-10  # the brief's agreement with lifelines


def _lifelines(data: SurvivalData, entry: np.ndarray | None = None, alpha: float = 0.05) -> KaplanMeierFitter:
    return KaplanMeierFitter(alpha=alpha).fit(data.time, data.event.astype(int),
                                              entry=data.entry if entry is None else entry)


def _check_against(km, fitter: KaplanMeierFitter) -> None:
    t = km.time
    surv = fitter.survival_function_.iloc[:, 0].reindex(t).to_numpy()
    ci = fitter.confidence_interval_.reindex(t).to_numpy()
    np.testing.assert_allclose(km.survival, surv, rtol=0, atol=TOL)
    np.testing.assert_allclose(km.lower, ci[:, 0], rtol=0, atol=TOL)
    np.testing.assert_allclose(km.upper, ci[:, 1], rtol=0, atol=TOL)


@pytest.fixture(scope="module")
def delayed() -> SurvivalData:
    """Simulated left-truncated data: Weibull exits after a uniform entry, independent censoring; only
    patients still at risk at entry are kept (continuous times: no ties)."""
    rng = np.random.default_rng(20261205)
    n = 3000
    entry = np.where(rng.random(n) < 0.5, 0.0, rng.uniform(0.0, 2.0, n))
    life = 3.0 * rng.weibull(1.4, n)
    keep = life > entry
    censor = entry + rng.exponential(4.0, n)
    time = np.minimum(life, censor)[keep]
    return SurvivalData.from_arrays(time, (life <= censor)[keep].astype(int), entry[keep])


def test_rossi_matches_lifelines_and_the_cohort_estimator() -> None:
    rossi = load_rossi()
    data = SurvivalData.from_arrays(rossi["week"], rossi["arrest"], unit="weeks")
    km = kaplan_meier(data)
    fitter = _lifelines(data)
    _check_against(km, fitter)
    table = km.table
    events = fitter.event_table.reindex(km.time)
    np.testing.assert_array_equal(table["at_risk"].to_numpy()[1:], events["at_risk"].to_numpy()[1:])
    np.testing.assert_array_equal(table["events"].to_numpy(), events["observed"].fillna(0).to_numpy())
    np.testing.assert_array_equal(table["censored"].to_numpy(), events["censored"].fillna(0).to_numpy())
    # without delayed entry, the same estimate and Greenwood error as the cohort estimator of sim.analysis
    patients = pd.DataFrame({"strategy": "all", "patient": np.arange(data.n), "exit_time": data.time,
                             "exit_reason": np.where(data.event, "absorbed", "censored")})
    cohort = cohort_kaplan_meier(patients)
    np.testing.assert_allclose(table["survival"], cohort["survival"], rtol=1e-14)
    np.testing.assert_allclose(table["std_error"], cohort["std_error"], rtol=1e-12)


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_delayed_entry_matches_lifelines(delayed: SurvivalData, level: float) -> None:
    assert delayed.delayed and np.unique(np.concatenate([delayed.time, delayed.entry])).size > delayed.n
    km = kaplan_meier(delayed, level=level)
    fitter = _lifelines(delayed, alpha=1.0 - level)
    _check_against(km, fitter)
    at_risk = fitter.event_table["at_risk"].reindex(km.time).to_numpy()
    np.testing.assert_array_equal(km.table["at_risk"].to_numpy()[1:], at_risk[1:])
    # ignoring the entry times would give another curve (the risk sets early on are too large)
    naive = _lifelines(delayed, entry=np.zeros(delayed.n))
    assert np.max(np.abs(km.survival - naive.survival_function_.iloc[:, 0].reindex(km.time).to_numpy())) > 0.01


def test_entry_tied_with_an_exit_is_not_at_risk_there() -> None:
    # invented: integer months; patients entering at 2 and 3, when others exit
    time = np.array([2.0, 3, 3, 5, 6, 8, 9, 4, 7])
    event = np.array([1, 1, 0, 1, 0, 1, 1, 1, 0])
    entry = np.array([0.0, 0, 2, 3, 0, 2, 3, 0, 0])
    data = SurvivalData.from_arrays(time, event, entry, unit="months")
    km = kaplan_meier(data)
    _check_against(km, _lifelines(data, entry=np.where(entry > 0, entry + 1e-6, 0.0)))
    # at 3: the four entered at 0 and not yet exited, and the two entered at 2; not the two entering at 3
    assert km.table.set_index("time").loc[3.0, "at_risk"] == int(((entry < 3) & (time >= 3)).sum()) == 6


def test_numbers_at_risk_at_chosen_times(delayed: SurvivalData) -> None:
    fitter = _lifelines(delayed)
    exits = np.sort(np.unique(delayed.time))[::150]
    np.testing.assert_array_equal(numbers_at_risk(delayed, exits)["all"],
                                  fitter.event_table["at_risk"].reindex(exits).to_numpy())
    ticks = np.array([0.0, 0.5, 1.0, 2.5, 4.0, 50.0])
    counts = numbers_at_risk(delayed, ticks)["all"]
    assert counts[0] == int(np.sum(delayed.entry == 0.0)) and counts[-1] == 0
    # the definition, counted directly: entry < t <= exit
    for t, n in zip(ticks[1:], counts[1:]):
        assert n == int(np.sum((delayed.entry < t) & (t <= delayed.time)))


def test_arms_each_their_own_curve(delayed: SurvivalData) -> None:
    arm = np.where(np.arange(delayed.n) % 2 == 0, "control", "treated")
    data = SurvivalData.from_arrays(delayed.time, delayed.event.astype(int), delayed.entry, arm)
    kms = kaplan_meier_by_arm(data)
    assert [k.arm for k in kms] == ["control", "treated"]
    for km in kms:
        _check_against(km, _lifelines(data.arm(km.arm)))
    counts = numbers_at_risk(data, [0.0, 1.0])
    assert set(counts) == {"control", "treated"}
    assert counts["control"][1] == int(np.sum((data.entry < 1.0) & (data.time >= 1.0) & (arm == "control")))


def test_interval_at_the_ends_as_lifelines_reports_it() -> None:
    # invented: everybody dies, so S reaches 0; before the first event S = 1
    data = SurvivalData.from_arrays([1.0, 2.0, 2.0, 3.0], [1, 1, 0, 1])
    km = kaplan_meier(data)
    _check_against(km, _lifelines(data))
    assert (km.lower[0], km.upper[0]) == (1.0, 1.0)
    assert (km.survival[-1], km.lower[-1], km.upper[-1]) == (0.0, 0.0, 0.0) and np.isnan(km.table["std_error"].iat[-1])
    inside = (km.survival > 0) & (km.survival < 1)
    assert np.all((km.lower[inside] < km.survival[inside]) & (km.survival[inside] < km.upper[inside]))


@pytest.mark.parametrize("level", [0.0, 1.0, 1.5, float("nan")])
def test_bad_level_is_refused(delayed: SurvivalData, level: float) -> None:
    with pytest.raises(SurvivalDataError) as err:
        kaplan_meier(delayed, level=level)
    assert err.value.problems[0].path == ("level",)


@pytest.mark.parametrize("times", [[-1.0], [1.0, float("inf")]])
def test_bad_times_are_refused(delayed: SurvivalData, times: list[float]) -> None:
    with pytest.raises(SurvivalDataError) as err:
        numbers_at_risk(delayed, times)
    assert err.value.problems[0].path == ("times",)

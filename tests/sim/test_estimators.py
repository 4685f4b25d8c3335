"""Tests of the sim.analysis estimators (Kaplan-Meier, Aalen-Johansen, time in state, crude rates) on
event logs simulated here with numpy (fixed seeds), in the engine's format.

References used as independent checks:
- lifelines.KaplanMeierFitter and scipy.stats.ecdf(CensoredData) (general-purpose Kaplan-Meier with
  Greenwood intervals); lifelines.AalenJohansenFitter (competing-risks cumulative incidence);
- a plain-loop Aalen-Johansen product integral written below from its definition (Aalen & Johansen
  1978, Scand J Stat 5:141-150);
- closed forms for a constant hazard (docs/methods.md, 'Rates, risks and units', Miller & Homan 1994, Med Decis Making
  14:52-58) and for discounting (docs/methods.md, 'Outcomes and increments') checked with scipy.integrate.quad.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats as st
from lifelines import AalenJohansenFitter, KaplanMeierFitter
from scipy.integrate import quad

from sim.analysis import (
    crude_rate,
    crude_risk,
    cumulative_incidence,
    kaplan_meier,
    per_patient_time_in_states,
    restricted_mean_survival,
    state_occupancy,
    time_in_states,
)

Z975 = st.norm.ppf(0.975)

# Illness-death with recovery (constant intensities, invented numbers).
ILLNESS = ("healthy", "sick", "dead")
ILLNESS_MOVES = (
    ("onset", "healthy", "sick", 0.20),
    ("recovery", "sick", "healthy", 0.30),
    ("background death", "healthy", "dead", 0.03),
    ("background death", "sick", "dead", 0.03),
    ("disease death", "sick", "dead", 0.10),
)


# --------------------------------------------------------------------------- synthetic logs
def simulate(rng: np.random.Generator, n: int, states, moves, initial: str, horizon,
             strategy: str = "base") -> tuple[pd.DataFrame, pd.DataFrame]:
    """Constant-intensity multi-state histories in the engine's format, vectorised over patients.

    ``moves``: (name, from, to, rate). A state with no moves is absorbing. ``horizon``: scalar or
    per-patient array (censoring at the horizon). Patient ids are 1000 + 2 i (not 0..n-1 on purpose).
    """
    code = {s: i for i, s in enumerate(states)}
    horizon = np.broadcast_to(np.asarray(horizon, dtype=float), (n,)).copy()
    entry_age = 40.0 + 30.0 * rng.random(n)
    cur = np.full(n, code[initial])
    t = np.zeros(n)
    active = horizon > 0
    absorbed = np.zeros(n, dtype=bool)
    rec: list[tuple[np.ndarray, ...]] = []
    while active.any():
        for s in np.unique(cur[active]):
            sel = np.flatnonzero(active & (cur == s))
            out = [m for m in moves if m[1] == states[s]]
            rates = np.array([m[3] for m in out])
            t_new = t[sel] + rng.exponential(1.0 / rates.sum(), sel.size)
            cens = t_new >= horizon[sel]
            t[sel[cens]] = horizon[sel[cens]]
            active[sel[cens]] = False
            mv = sel[~cens]
            which = np.minimum(np.searchsorted(np.cumsum(rates) / rates.sum(), rng.random(mv.size), side="right"),
                               len(out) - 1)
            to = np.array([code[m[2]] for m in out])[which]
            rec.append((mv, t_new[~cens], np.full(mv.size, s), to, np.array([m[0] for m in out], dtype=object)[which]))
            t[mv], cur[mv] = t_new[~cens], to
            done = np.array([not any(m[1] == states[k] for m in moves) for k in to], dtype=bool)
            absorbed[mv[done]] = True
            active[mv[done]] = False
    ids = 1000 + 2 * np.arange(n, dtype=np.int64)
    p, tm, fr, to, nm = (np.concatenate(x) for x in zip(*rec)) if rec else [np.zeros(0)] * 5
    p = p.astype(np.int64)
    o = np.lexsort((tm, p))
    names = list(dict.fromkeys(m[0] for m in moves))
    cat = lambda codes: pd.Categorical.from_codes(np.asarray(codes, dtype=np.int64), categories=list(states))  # noqa: E731
    events = pd.DataFrame({
        "strategy": pd.Categorical([strategy] * p.size),
        "patient": ids[p[o]],
        "time": tm[o].astype(np.float64),
        "age": entry_age[p[o]] + tm[o],
        "from_state": cat(fr[o]),
        "to_state": cat(to[o]),
        "transition": pd.Categorical(nm[o], categories=names),
    })
    patients = pd.DataFrame({
        "strategy": pd.Categorical([strategy] * n),
        "patient": ids,
        "entry_age": entry_age,
        "sex": pd.Categorical(np.where(rng.random(n) < 0.5, "female", "male")),
        "initial_state": cat(np.full(n, code[initial])),
        "exit_time": t,
        "exit_age": entry_age + t,
        "final_state": cat(cur),
        "exit_reason": pd.Categorical(np.where(absorbed, "absorbed", "censored"), categories=["absorbed", "censored"]),
    })
    return events, patients


def illness_log(seed: int, n: int, staggered: bool):
    """Illness-death log; with ``staggered`` horizons the censoring falls in every transient state."""
    rng = np.random.default_rng(seed)
    horizon = rng.uniform(2.0, 12.0, n) if staggered else 10.0
    return simulate(rng, n, ILLNESS, ILLNESS_MOVES, "healthy", horizon)


def tiny_log(rows, patients_rows, states=("healthy", "sick", "dead"), strategy="base"):
    """Hand-built log: rows (patient, time, from, to, name); patients (id, exit_time, final, reason)."""
    ev = pd.DataFrame(rows, columns=["patient", "time", "from_state", "to_state", "transition"])
    pt = pd.DataFrame(patients_rows, columns=["patient", "exit_time", "final_state", "exit_reason"])
    ev.insert(0, "strategy", pd.Categorical([strategy] * len(ev)))
    pt.insert(0, "strategy", pd.Categorical([strategy] * len(pt)))
    ev["patient"] = ev["patient"].astype(np.int64)
    ev["time"] = ev["time"].astype(np.float64)
    pt["patient"] = pt["patient"].astype(np.int64)
    pt["exit_time"] = pt["exit_time"].astype(np.float64)
    pt["initial_state"] = pd.Categorical([states[0]] * len(pt), categories=list(states))
    for c in ("from_state", "to_state"):
        ev[c] = pd.Categorical(ev[c], categories=list(states))
    pt["final_state"] = pd.Categorical(pt["final_state"], categories=list(states))
    ev["transition"] = pd.Categorical(ev["transition"])
    pt["exit_reason"] = pd.Categorical(pt["exit_reason"], categories=["absorbed", "censored"])
    return ev, pt


# --------------------------------------------------------------------------- test-local references
def aalen_johansen_reference(events, patients, states, times):
    """Plain-loop Aalen-Johansen product integral, written from the definition (Aalen & Johansen 1978):
    p(t) = p(0) prod_{s <= t} (I + dA(s)), dA_jk = dN_jk(s) / Y_j(s), Y_j(s) = patients in j just
    before s with exit_time >= s; and E N_k(t) = sum_{s <= t} p_j(s-) dN_k(s) / Y_j(s).
    Returns (occupancy (len(times), S), {(name, from, to): array over times})."""
    code = {s: i for i, s in enumerate(states)}
    hist = {}
    for row in patients.itertuples():
        hist[row.patient] = [code[row.initial_state], [], row.exit_time]
    for row in events.itertuples():
        hist[row.patient][1].append((row.time, code[row.from_state], code[row.to_state], row.transition))
    S = len(states)
    p = np.zeros(S)
    for h in hist.values():
        p[h[0]] += 1.0 / len(hist)
    kinds = sorted({(e[3], e[1], e[2]) for h in hist.values() for e in h[1]})
    c = dict.fromkeys(kinds, 0.0)
    p_out = np.zeros((len(times), S))
    c_out = {k: np.zeros(len(times)) for k in kinds}
    event_times = sorted({e[0] for h in hist.values() for e in h[1]})
    grid = sorted(set(event_times) | set(times))
    for s in grid:
        if s in event_times:
            y = np.zeros(S)
            dn = np.zeros((S, S))
            dk = dict.fromkeys(kinds, 0)
            for init, evs, exit_time in hist.values():
                state = init
                for (te, fr, to, name) in evs:
                    if te < s:
                        state = to
                    elif te == s:
                        dn[fr, to] += 1
                        dk[(name, fr, to)] += 1
                if exit_time >= s:
                    y[state] += 1
            for k in kinds:
                if dk[k]:
                    c[k] += p[k[1]] * dk[k] / y[k[1]]
            da = np.zeros((S, S))
            for j in range(S):
                if y[j] > 0:
                    da[j] = dn[j] / y[j]
                    da[j, j] = -dn[j].sum() / y[j]
            p = p @ (np.eye(S) + da)
        for i, t in enumerate(times):
            if t == s:
                p_out[i] = p
                for k in kinds:
                    c_out[k][i] = c[k]
    return p_out, {(name, states[fr], states[to]): v for (name, fr, to), v in c_out.items()}


def state_at(events, patients, states, t):
    """Each patient's state at t, read from the log (target of the last move at or before t)."""
    state = pd.Series(patients["initial_state"].astype(str).to_numpy(), index=patients["patient"].to_numpy())
    last = events[events["time"] <= t].groupby("patient")["to_state"].last().astype(str)
    state.loc[last.index] = last.to_numpy()
    return state


def lifelines_fit(fitter, *args, **kwargs):
    # lifelines calls np.seterr(divide="ignore") globally inside fit; errstate restores the caller's
    # floating-point error state so the RuntimeWarning-as-error policy keeps working in later tests.
    with np.errstate():
        return fitter.fit(*args, **kwargs)


# --------------------------------------------------------------------------- Kaplan-Meier
def test_kaplan_meier_matches_lifelines_and_scipy_with_censoring():
    rng = np.random.default_rng(101)
    events, patients = simulate(rng, 400, ("alive", "dead"), (("death", "alive", "dead", 0.15),), "alive",
                                rng.uniform(1.0, 10.0, 400))
    km = kaplan_meier(patients)
    durations = patients["exit_time"].to_numpy()
    observed = (patients["exit_reason"] == "absorbed").to_numpy()
    assert 0 < observed.sum() < observed.size

    # Reference 1: lifelines.KaplanMeierFitter (independent general-purpose implementation).
    kmf = lifelines_fit(KaplanMeierFitter(alpha=0.05), durations, event_observed=observed)
    np.testing.assert_array_equal(km["time"].to_numpy(), kmf.survival_function_.index.to_numpy())
    np.testing.assert_allclose(km["survival"], kmf.survival_function_.iloc[:, 0].to_numpy(), rtol=1e-12, atol=0)
    np.testing.assert_array_equal(km["at_risk"], kmf.event_table["at_risk"].to_numpy())
    np.testing.assert_array_equal(km["events"], kmf.event_table["observed"].to_numpy())
    # Greenwood variance from lifelines' exponential-Greenwood (log-log) lower bound:
    # log(-log lo) = log(-log S) - z sqrt(V) / log S, with V = sum d / (Y (Y - d)), SE = S sqrt(V).
    s = kmf.survival_function_.iloc[:, 0].to_numpy()
    lo = kmf.confidence_interval_.iloc[:, 0].to_numpy()
    inner = (s > 0) & (s < 1)
    v = np.log(s[inner])
    se_lifelines = s[inner] * (np.log(-v) - np.log(-np.log(lo[inner]))) * v / Z975
    np.testing.assert_allclose(km["std_error"].to_numpy()[inner], se_lifelines, rtol=1e-9)

    # Reference 2: scipy.stats.ecdf on CensoredData (independent implementation, linear Greenwood CI).
    res = st.ecdf(st.CensoredData(uncensored=durations[observed], right=durations[~observed]))
    np.testing.assert_allclose(km["survival"], res.sf.evaluate(km["time"].to_numpy()), rtol=1e-12, atol=0)
    ci = res.sf.confidence_interval(0.95, method="linear")
    lo, hi = ci.low.probabilities, ci.high.probabilities
    unclipped = (lo > 0) & (hi < 1)
    se_scipy = (hi - lo)[unclipped] / (2 * Z975)
    ours = km.set_index("time")["std_error"].reindex(res.sf.quantiles[unclipped]).to_numpy()
    np.testing.assert_allclose(ours, se_scipy, rtol=1e-9)


def test_kaplan_meier_hand_example():
    # exits: 1 (death), 2 (censored), 3 (death), 3 (censored): S = 1, 3/4, 3/4, 3/4 * 1/2 = 3/8.
    # Greenwood at t=1: S^2 * 1/(4*3) = (9/16)/12; at t=3: (3/8)^2 (1/12 + 1/(2*1)).
    ev, pt = tiny_log([(1, 1.0, "healthy", "dead", "death"), (3, 3.0, "healthy", "dead", "death")],
                      [(1, 1.0, "dead", "absorbed"), (2, 2.0, "healthy", "censored"),
                       (3, 3.0, "dead", "absorbed"), (4, 3.0, "healthy", "censored")])
    km = kaplan_meier(pt)
    np.testing.assert_array_equal(km["time"], [0.0, 1.0, 2.0, 3.0])
    np.testing.assert_array_equal(km["at_risk"], [4, 4, 3, 2])
    np.testing.assert_array_equal(km["events"], [0, 1, 0, 1])
    np.testing.assert_allclose(km["survival"], [1.0, 0.75, 0.75, 0.375], rtol=1e-15)
    np.testing.assert_allclose(km["std_error"], [0.0, math.sqrt(9 / 16 / 12), math.sqrt(9 / 16 / 12),
                                                 0.375 * math.sqrt(1 / 12 + 1 / 2)], rtol=1e-14)


def test_kaplan_meier_std_error_is_nan_once_everyone_at_risk_is_absorbed():
    # The last patient dies: S = 0 and Greenwood's formula is 0 x inf (NaN, as scipy.stats.ecdf).
    ev, pt = tiny_log([(1, 1.0, "healthy", "dead", "death"), (2, 2.0, "healthy", "dead", "death")],
                      [(1, 1.0, "dead", "absorbed"), (2, 2.0, "dead", "absorbed")])
    km = kaplan_meier(pt)
    np.testing.assert_allclose(km["survival"], [1.0, 0.5, 0.0])
    assert np.isfinite(km["std_error"].iloc[1]) and np.isnan(km["std_error"].iloc[2])


# --------------------------------------------------------------------------- state occupancy
def test_state_occupancy_matches_product_integral_reference_with_censoring():
    events, patients = illness_log(seed=7, n=150, staggered=True)
    times = np.array([0.0, 0.5, 1.5, 2.5, 4.0, 6.0, 8.0, 10.0, 11.5])
    assert (patients["exit_reason"] == "censored").sum() > 50  # censoring in every transient state
    assert set(patients.loc[patients["exit_reason"] == "censored", "final_state"]) == {"healthy", "sick"}
    res = state_occupancy(events, patients, ILLNESS, times)
    p = res["probability"].to_numpy().reshape(times.size, 3)
    ref, _ = aalen_johansen_reference(events, patients, ILLNESS, times)
    np.testing.assert_allclose(p, ref, rtol=0, atol=1e-12)
    np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    assert list(res["state"].cat.categories) == list(ILLNESS)
    np.testing.assert_array_equal(res["time"].to_numpy(), np.repeat(times, 3))


def test_state_occupancy_small_block_size_gives_the_same_product(monkeypatch):
    # The product integral is evaluated in blocks of event times; the split must not matter.
    import sim.analysis.aalen_johansen as est

    events, patients = illness_log(seed=8, n=120, staggered=True)
    times = [3.0, 7.0, 9.5]
    full = state_occupancy(events, patients, ILLNESS, times)
    monkeypatch.setattr(est, "BLOCK", 3)
    small = state_occupancy(events, patients, ILLNESS, times)
    np.testing.assert_allclose(small["probability"], full["probability"], rtol=0, atol=1e-13)


def test_state_occupancy_without_censoring_equals_empirical_proportions():
    events, patients = illness_log(seed=11, n=500, staggered=False)  # common horizon 10
    times = [0.0, 1.0, 3.3, 7.0, 10.0]
    res = state_occupancy(events, patients, ILLNESS, times)
    n = len(patients)
    for t in times:
        counts = state_at(events, patients, ILLNESS, t).value_counts()
        expected = np.array([counts.get(s, 0) for s in ILLNESS]) / n
        got = res.loc[res["time"] == t]
        np.testing.assert_array_equal(got["probability"].to_numpy(), expected)  # exactly count / n
        np.testing.assert_allclose(got["std_error"], np.sqrt(expected * (1 - expected) / n), rtol=1e-15)


def test_state_occupancy_is_aalen_johansen_not_censoring_weighted_proportion():
    # Hand example, two transient states A (healthy) and B (sick). Patient 1: A->B at 1, censored
    # at 3; patient 2: A, censored at 2; patient 3: A, censored at 4; patient 4: A->B at 1.5,
    # censored at 4. Aalen-Johansen: at 1, Y_A = 4, p_A = 3/4; at 1.5, Y_A = 3, p_A = 3/4 * 2/3 = 1/2;
    # no events after, so p(2.5) = (1/2, 1/2). The IPCW proportion with KM censoring weights would
    # give p_A(2.5) = (1/4) * 1 / K(2.5) = (1/4) / (3/4) = 1/3 instead (patient 2 censored in A).
    ev, pt = tiny_log([(1, 1.0, "healthy", "sick", "onset"), (4, 1.5, "healthy", "sick", "onset")],
                      [(1, 3.0, "sick", "censored"), (2, 2.0, "healthy", "censored"),
                       (3, 4.0, "healthy", "censored"), (4, 4.0, "sick", "censored")])
    res = state_occupancy(ev, pt, ("healthy", "sick", "dead"), [1.0, 2.5])
    np.testing.assert_allclose(res["probability"], [0.75, 0.25, 0.0, 0.5, 0.5, 0.0], rtol=1e-15)
    # std_error at 2.5: binomial with n_eff = n K(2.5-) = 4 * 3/4 = 3.
    np.testing.assert_allclose(res["std_error"].iloc[3], math.sqrt(0.25 / 3), rtol=1e-15)


def test_tied_times_are_simultaneous_like_the_reference():
    # Times rounded up to a 0.25-year grid: moves of different patients from different states, and
    # censorings, share times. Aalen-Johansen sums dA over all moves at a time (no ordering within
    # it); the reference does the same. Patients with two moves in one step are dropped.
    events, patients = illness_log(seed=37, n=150, staggered=True)
    events = events.assign(time=np.ceil(events["time"] / 0.25) * 0.25)
    patients = patients.assign(exit_time=np.ceil(patients["exit_time"] / 0.25) * 0.25)
    clash = events.loc[events.duplicated(["patient", "time"], keep=False), "patient"].unique()
    events = events[~events["patient"].isin(clash)].reset_index(drop=True)
    patients = patients[~patients["patient"].isin(clash)].reset_index(drop=True)
    assert events.duplicated("time").sum() > 100
    times = np.array([0.25, 1.0, 2.5, 5.0, 7.75, 11.0])
    occ = state_occupancy(events, patients, ILLNESS, times)["probability"].to_numpy().reshape(times.size, 3)
    inc = cumulative_incidence(events, patients, ILLNESS, times)
    ref_p, ref_c = aalen_johansen_reference(events, patients, ILLNESS, times)
    np.testing.assert_allclose(occ, ref_p, rtol=0, atol=1e-12)
    for (name, fr, to), expected in ref_c.items():
        got = inc[(inc["transition"] == name) & (inc["from_state"] == fr) & (inc["to_state"] == to)]
        np.testing.assert_allclose(got["value"].to_numpy(), expected, rtol=0, atol=1e-12)


def test_state_occupancy_standard_error_uses_kish_effective_size_of_censoring_weights():
    # Hand example (the Kaplan-Meier one above): deaths at 1 and 3, censored at 2 and 3. At t = 2.5:
    # p = (3/4, 0, 1/4). Censoring KM: K(2.5-) = 1 - 1/3 = 2/3 (3 at risk of censoring at 2).
    # Weights: patient 1 (dead at 1) 1 / K(1-) = 1; patients 3, 4 (followed at 2.5) 3/2 each;
    # patient 2 (censored at 2) 0. n_eff = (1 + 3)^2 / (1 + 2 * 9/4) = 16 / 5.5 = 32/11.
    ev, pt = tiny_log([(1, 1.0, "healthy", "dead", "death"), (3, 3.0, "healthy", "dead", "death")],
                      [(1, 1.0, "dead", "absorbed"), (2, 2.0, "healthy", "censored"),
                       (3, 3.0, "dead", "absorbed"), (4, 3.0, "healthy", "censored")])
    res = state_occupancy(ev, pt, ("healthy", "sick", "dead"), [2.5])
    np.testing.assert_allclose(res["probability"], [0.75, 0.0, 0.25], rtol=1e-15)
    se = math.sqrt(0.75 * 0.25 * 11 / 32)
    np.testing.assert_allclose(res["std_error"], [se, 0.0, se], rtol=1e-14)


# --------------------------------------------------------------------------- cumulative incidence
def test_cumulative_incidence_matches_lifelines_aalen_johansen_competing_risks():
    rng = np.random.default_rng(2024)
    states = ("alive", "cancer death", "other death")
    moves = (("cancer", "alive", "cancer death", 0.06), ("other", "alive", "other death", 0.12))
    events, patients = simulate(rng, 300, states, moves, "alive", rng.uniform(2.0, 15.0, 300))
    times = np.array([0.0, 0.7, 2.0, 4.5, 7.0, 10.0, 13.0])
    res = cumulative_incidence(events, patients, states, times)

    # Reference: lifelines.AalenJohansenFitter, cause-specific CIF with censoring (0 = censored).
    cause = patients.set_index("patient")["final_state"].astype(str).map(
        {"alive": 0, "cancer death": 1, "other death": 2}).to_numpy()
    durations = patients["exit_time"].to_numpy()
    for code, name, target in ((1, "cancer", "cancer death"), (2, "other", "other death")):
        ajf = lifelines_fit(AalenJohansenFitter(calculate_variance=False), durations, cause, event_of_interest=code)
        expected = ajf.predict(times).to_numpy()
        got = res[res["transition"] == name]
        assert (got["from_state"] == "alive").all() and (got["to_state"] == target).all()
        np.testing.assert_allclose(got["value"].to_numpy(), expected, rtol=0, atol=1e-12)


def test_cumulative_incidence_recurrent_moves_match_product_integral_reference():
    events, patients = illness_log(seed=3, n=150, staggered=True)
    times = np.array([0.0, 1.0, 3.0, 6.0, 9.0, 11.0])
    res = cumulative_incidence(events, patients, ILLNESS, times)
    _, ref = aalen_johansen_reference(events, patients, ILLNESS, times)
    assert len(ref) == 5  # background death leaves two states: one row each
    for (name, fr, to), expected in ref.items():
        got = res[(res["transition"] == name) & (res["from_state"] == fr) & (res["to_state"] == to)]
        np.testing.assert_allclose(got["value"].to_numpy(), expected, rtol=0, atol=1e-12)
    onset = res[res["transition"] == "onset"]["value"].to_numpy()
    assert onset[-1] > 0.5  # onset recurs: more than one occurrence for some patients


def test_cumulative_incidence_without_censoring_is_mean_count_with_exact_standard_error():
    events, patients = illness_log(seed=5, n=400, staggered=False)
    times = [2.0, 10.0]
    res = cumulative_incidence(events, patients, ILLNESS, times)
    n = len(patients)
    for t in times:
        counts = (events[(events["time"] <= t) & (events["transition"] == "onset")]
                  .groupby("patient").size().reindex(patients["patient"], fill_value=0).to_numpy())
        assert counts.max() >= 2 or t < 10.0
        got = res[(res["time"] == t) & (res["transition"] == "onset")]
        np.testing.assert_array_equal(got["value"].to_numpy(), [counts.sum() / n])  # exactly count / n
        np.testing.assert_allclose(got["std_error"].to_numpy(), [counts.std(ddof=0) / math.sqrt(n)], rtol=1e-12)


def test_times_beyond_follow_up_are_rejected():
    events, patients = illness_log(seed=13, n=50, staggered=True)
    end = patients.loc[patients["exit_reason"] == "censored", "exit_time"].max()
    with pytest.raises(ValueError, match=r"times: .* beyond the end of follow-up .* must be <="):
        state_occupancy(events, patients, ILLNESS, [1.0, end + 0.5])
    with pytest.raises(ValueError, match=r"times: value -1\.0 is invalid; times must be finite and >= 0"):
        cumulative_incidence(events, patients, ILLNESS, [-1.0])
    assert len(state_occupancy(events, patients, ILLNESS, [end])) == 3


# --------------------------------------------------------------------------- time in states
def tiny_history():
    # Patient 1: healthy [0, 2), sick [2, 5), healthy [5, 6), dead at 6 (absorbed).
    # Patient 2: healthy [0, 10), censored at 10.
    return tiny_log([(1, 2.0, "healthy", "sick", "onset"), (1, 5.0, "sick", "healthy", "recovery"),
                     (1, 6.0, "healthy", "dead", "death")],
                    [(1, 6.0, "dead", "absorbed"), (2, 10.0, "healthy", "censored")])


def test_time_in_states_hand_example():
    ev, pt = tiny_history()
    per = per_patient_time_in_states(ev, pt, ILLNESS)
    # healthy: 2 + 1 = 3 and 10; sick: 3 and 0; dead: 0 and 0.
    np.testing.assert_array_equal(per.to_numpy(), [[3.0, 3.0, 0.0], [10.0, 0.0, 0.0]])
    assert list(per.index) == [1, 2] and list(per.columns) == list(ILLNESS)
    res = time_in_states(ev, pt, ILLNESS)
    # means (3 + 10)/2 = 6.5, (3 + 0)/2 = 1.5, 0; SE = s / sqrt(2) with s^2 = (a - b)^2 / 2: 3.5, 1.5, 0.
    np.testing.assert_allclose(res["mean"], [6.5, 1.5, 0.0], rtol=1e-15)
    np.testing.assert_allclose(res["std_error"], [3.5, 1.5, 0.0], rtol=1e-15)


def test_discounted_time_in_states_matches_quadrature():
    ev, pt = tiny_history()
    rate = 0.035
    delta = math.log1p(rate)  # docs/methods.md, 'Outcomes and increments': continuous rate ln(1 + d)

    def disc(a, b):
        return quad(lambda t: math.exp(-delta * t), a, b, epsabs=0, epsrel=1e-13)[0]

    expected = [[disc(0, 2) + disc(5, 6), disc(2, 5), 0.0], [disc(0, 10), 0.0, 0.0]]
    per = per_patient_time_in_states(ev, pt, ILLNESS, discount_rate=rate)
    np.testing.assert_allclose(per.to_numpy(), expected, rtol=1e-12, atol=0)


def test_per_patient_rows_add_up_to_exit_time():
    events, patients = illness_log(seed=17, n=300, staggered=True)
    per = per_patient_time_in_states(events, patients, ILLNESS)
    exit_time = patients.set_index("patient")["exit_time"].reindex(per.index).to_numpy()
    np.testing.assert_allclose(per.sum(axis=1).to_numpy(), exit_time, rtol=1e-12)
    d = 0.03
    per_d = per_patient_time_in_states(events, patients, ILLNESS, discount_rate=d)
    np.testing.assert_allclose(per_d.sum(axis=1).to_numpy(),
                               -np.expm1(-math.log1p(d) * exit_time) / math.log1p(d), rtol=1e-12)


# --------------------------------------------------------------------------- statistical check
def test_constant_hazard_estimates_agree_with_closed_forms_within_four_standard_errors():
    # Death at constant rate r, fixed horizon T. Closed forms: E min(T_death, T) = (1 - exp(-rT)) / r;
    # deaths / person-years estimates r; P(death by T) = 1 - exp(-rT) (docs/methods.md, 'Rates, risks and units', Miller
    # & Homan 1994, Med Decis Making 14:52-58). Each within 4 Monte Carlo standard errors.
    r, horizon, n = 0.1, 10.0, 20_000
    rng = np.random.default_rng(424242)
    events, patients = simulate(rng, n, ("alive", "dead"), (("death", "alive", "dead", r),), "alive", horizon)

    rmst = restricted_mean_survival(patients)
    assert rmst["n"] == n
    assert abs(rmst["mean"] - (1 - math.exp(-r * horizon)) / r) <= 4 * rmst["std_error"]

    rate = crude_rate(events, patients, "death", ("alive", "dead"))
    assert rate["events"] == (patients["exit_reason"] == "absorbed").sum()
    assert rate["person_years"] == pytest.approx(patients["exit_time"].sum(), rel=1e-12)
    assert abs(rate["rate"] - r) <= 4 * rate["std_error"]

    risk = crude_risk(patients, horizon)
    assert abs(risk["risk"] - (1 - math.exp(-r * horizon))) <= 4 * risk["std_error"]
    risk_half = crude_risk(patients, horizon / 2, events=events, transition="death")
    assert abs(risk_half["risk"] - (1 - math.exp(-r * horizon / 2))) <= 4 * risk_half["std_error"]

    km = kaplan_meier(patients)
    at = km[km["time"] <= horizon / 2].iloc[-1]
    assert abs(at["survival"] - math.exp(-r * horizon / 2)) <= 4 * at["std_error"]


def test_crude_risk_of_a_transition_counts_first_occurrences():
    events, patients = illness_log(seed=19, n=300, staggered=False)
    res = crude_risk(patients, 4.0, events=events, transition="onset")
    ever = events[(events["transition"] == "onset") & (events["time"] <= 4.0)]["patient"].nunique()
    assert res["events"] == ever and res["n"] == 300
    assert res["std_error"] == pytest.approx(math.sqrt(res["risk"] * (1 - res["risk"]) / 300), rel=1e-15)


def test_crude_rate_of_a_name_leaving_several_states_uses_time_in_all_of_them():
    events, patients = illness_log(seed=23, n=300, staggered=True)
    per = per_patient_time_in_states(events, patients, ILLNESS)
    res = crude_rate(events, patients, "background death", ILLNESS)
    assert res["events"] == (events["transition"] == "background death").sum()
    assert res["person_years"] == pytest.approx(per["healthy"].sum() + per["sick"].sum(), rel=1e-12)
    only_sick = crude_rate(events, patients, "disease death", ILLNESS)
    assert only_sick["person_years"] == pytest.approx(per["sick"].sum(), rel=1e-12)


# --------------------------------------------------------------------------- strategies and errors
def two_strategies():
    ea, pa = illness_log(seed=29, n=80, staggered=True)
    rng = np.random.default_rng(31)
    eb, pb = simulate(rng, 90, ILLNESS, ILLNESS_MOVES, "healthy", rng.uniform(2.0, 12.0, 90), strategy="B")
    ea["strategy"] = pd.Categorical(["A"] * len(ea), categories=["A", "B"])
    pa["strategy"] = pd.Categorical(["A"] * len(pa), categories=["A", "B"])
    eb["strategy"] = pd.Categorical(["B"] * len(eb), categories=["A", "B"])
    pb["strategy"] = pd.Categorical(["B"] * len(pb), categories=["A", "B"])
    return (pd.concat([ea, eb], ignore_index=True), pd.concat([pa, pb], ignore_index=True), eb, pb)


def test_strategy_selects_its_rows():
    events, patients, eb, pb = two_strategies()
    pd.testing.assert_frame_equal(kaplan_meier(patients, strategy="B"), kaplan_meier(pb))
    pd.testing.assert_frame_equal(state_occupancy(events, patients, ILLNESS, [1.0, 5.0], strategy="B"),
                                  state_occupancy(eb, pb, ILLNESS, [1.0, 5.0]))
    pd.testing.assert_frame_equal(time_in_states(events, patients, ILLNESS, strategy="B", discount_rate=0.035),
                                  time_in_states(eb, pb, ILLNESS, discount_rate=0.035))
    assert restricted_mean_survival(patients, strategy="B") == restricted_mean_survival(pb)


def test_categorical_columns_are_checked_like_text_columns():
    # the engine's tables hold categoricals; their labels are matched through the codes, and a label
    # outside the rule (or a missing value) is reported with the same message as for text columns
    ev, pt = tiny_history()
    cat_ev = ev.astype({c: "category" for c in ("from_state", "to_state", "transition")})
    cat_pt = pt.astype({c: "category" for c in ("initial_state", "final_state", "exit_reason")})
    pd.testing.assert_frame_equal(state_occupancy(cat_ev, cat_pt, ILLNESS, [1.0, 4.0]),
                                  state_occupancy(ev, pt, ILLNESS, [1.0, 4.0]))
    with pytest.raises(ValueError, match=r"events\['from_state'\]: state 'sick' is not in states=\['healthy', 'dead'\]"):
        time_in_states(cat_ev, cat_pt, ("healthy", "dead"))
    bad = cat_pt.copy()
    bad["exit_reason"] = pd.Categorical(["absorbed", "lost"])
    with pytest.raises(ValueError, match=r"patients\['exit_reason'\]: value 'lost' is invalid; must be 'absorbed'"):
        kaplan_meier(bad)
    bad = cat_ev.copy()
    bad["transition"] = pd.Categorical([bad["transition"].iloc[0], None, *bad["transition"].iloc[2:]],
                                       categories=bad["transition"].cat.categories)
    with pytest.raises(ValueError, match=r"events\['transition'\]: a value is missing"):
        time_in_states(bad, cat_pt, ILLNESS)


def test_several_strategies_without_a_choice_raise_naming_them():
    events, patients, _, _ = two_strategies()
    with pytest.raises(ValueError, match=r"strategy: got None but the tables hold 2 strategies \['A', 'B'\]"):
        kaplan_meier(patients)
    with pytest.raises(ValueError, match=r"strategy: got None .* \['A', 'B'\]"):
        cumulative_incidence(events, patients, ILLNESS, [1.0])
    with pytest.raises(ValueError, match=r"strategy: 'C' is not in the tables; strategies present: \['A', 'B'\]"):
        time_in_states(events, patients, ILLNESS, strategy="C")


def test_bad_inputs_name_argument_value_and_rule():
    ev, pt = tiny_history()
    with pytest.raises(ValueError, match=r"events\['from_state'\]: state 'sick' is not in states=\['healthy', 'dead'\]"):
        time_in_states(ev, pt, ("healthy", "dead"))
    with pytest.raises(ValueError, match=r"discount_rate: -0\.01 is invalid; must be finite and >= 0"):
        time_in_states(ev, pt, ILLNESS, discount_rate=-0.01)
    with pytest.raises(ValueError, match=r"by_time: 12\.0 is invalid; 1 patient\(s\) were censored before it"):
        crude_risk(pt, 12.0)
    with pytest.raises(ValueError, match=r"transition: 'remission' never happens in the log"):
        crude_rate(ev, pt, "remission", ILLNESS)
    with pytest.raises(ValueError, match=r"states: \['healthy', 'healthy'\] has duplicates"):
        state_occupancy(ev, pt, ["healthy", "healthy"], [1.0])

    bad = pt.copy()
    bad["exit_time"] = bad["exit_time"].astype(float)
    bad.loc[1, "exit_time"] = -1.0
    with pytest.raises(ValueError, match=r"patients\['exit_time'\]: value -1\.0 .* must be finite and >= 0"):
        kaplan_meier(bad)
    bad = pt.copy()
    bad["exit_reason"] = ["absorbed", "lost"]
    with pytest.raises(ValueError, match=r"patients\['exit_reason'\]: value 'lost' is invalid; must be 'absorbed'"):
        kaplan_meier(bad)
    bad = ev.copy()
    bad.loc[1, "from_state"] = "healthy"  # patient 1 is sick at 5.0
    with pytest.raises(ValueError, match=r"events\['from_state'\]: 'healthy' at time 5\.0 for patient 1 is invalid; "
                                         r"a move must leave the state the patient is in \('sick'\)"):
        per_patient_time_in_states(bad, pt, ILLNESS)
    bad = ev.copy()
    bad.loc[2, "time"] = 7.0  # after exit at 6
    with pytest.raises(ValueError, match=r"events\['time'\]: 7\.0 for patient 1 is after its exit_time 6\.0"):
        time_in_states(bad, pt, ILLNESS)
    bad = ev.copy()
    bad.loc[1, "time"] = 2.0  # sick for no time at all
    with pytest.raises(ValueError, match=r"events\['time'\]: patient 1 has two moves at 2\.0; .* strictly increasing"):
        state_occupancy(bad, pt, ILLNESS, [1.0])
    bad = pt.copy()
    bad.loc[1, "final_state"] = "sick"
    with pytest.raises(ValueError, match=r"patients\['final_state'\]: 'sick' for patient 2 is invalid; "
                                         r"the patient's moves end in 'healthy'"):
        time_in_states(ev, bad, ILLNESS)
    with pytest.raises(ValueError, match=r"patients: missing column\(s\) \['exit_reason'\]"):
        kaplan_meier(pt.drop(columns="exit_reason"))


def test_row_order_of_the_tables_does_not_change_the_estimates():
    """The engine writes events sorted by patient then time, and the estimators skip their sort for
    such logs; shuffled rows (object columns instead of categoricals, too) must give the same
    numbers through the sorting path."""
    from sim.io.demo import demo_model
    from sim.engine.histories import simulate

    model = demo_model("lanthic")
    run = simulate(model, 3000, seed=5)
    ev, pt = run.strategy(model.strategy_names[0])
    rng = np.random.default_rng(0)
    ev_shuffled = ev.iloc[rng.permutation(len(ev))].astype({c: object for c in ("from_state", "to_state", "transition")})
    pt_shuffled = pt.iloc[rng.permutation(len(pt))].astype({"exit_reason": object, "strategy": object})
    grid = np.linspace(0.0, 20.0, 9)
    a = state_occupancy(ev, pt, model.state_names, grid)
    b = state_occupancy(ev_shuffled, pt_shuffled, model.state_names, grid)
    pd.testing.assert_frame_equal(a, b)

"""The probabilistic analysis' fast valuation path (issue 14, speed): each patient's outcomes from a
block's engine tables (sim.psa.patient_values) against an independent pandas computation (sojourns
rebuilt with a group-by shift, per-patient sums by group-by, discounting by the difference form
(exp(-delta t0) - exp(-delta t1)) / delta and by scipy.integrate.quad); per-draw means and MCSEs
against pandas group-by statistics; the same bits whatever the block split and workspace reuse;
block sizes that keep workers balanced; a block run with its source sent apart; local worker
processes started with the allocator settings."""

from __future__ import annotations

import dataclasses
import os

import numpy as np
import pandas as pd
import pytest
from scipy import integrate

from sim.analysis import OUTCOMES
from sim.engine import simulate_draws
from sim.psa import psa_jobs, run_block, table_hash
from sim.psa.blocks import TARGET_BLOCK_PATIENTS, block_draws_for, without_source
from sim.psa.draws_run import models_for_draws
from sim.psa.patient_values import Valuations, Workspace, block_outcomes, block_rows, draw_means, strategy_outcomes

from .test_psa_fixtures import apply_values, draws_table, entry_spread, markov_model

N = 60  # patients per draw
DRAWS = 5


def _models(variant: str, draws: int = DRAWS):
    """A block's models (invented numbers; the fixtures' own draws) in one of several valuations."""
    horizon = 1.5 if variant == "short horizon" else 20.0  # short: many patients never move
    model = markov_model(background=True, horizon=horizon, entry=entry_spread())
    models = models_for_draws(model, draws_table(draws), apply_values)
    rng = np.random.default_rng(17)
    out = []
    for d, m in enumerate(models):
        val = m.valuation
        if variant == "per-draw rates":  # differ by draw, some undiscounted, costs and effects apart
            val = dataclasses.replace(val, discount_effects=0.0 if d % 3 == 0 else float(rng.uniform(0.01, 0.06)),
                                      discount_costs=0.0 if d % 2 == 0 else float(rng.uniform(0.01, 0.06)))
        elif variant == "undiscounted":
            val = dataclasses.replace(val, discount_effects=0.0, discount_costs=0.0)
        elif variant == "no one-off costs":
            val = dataclasses.replace(val, transition_costs={})
        elif variant == "per-draw one-off costs":  # a cost on every exit, differing by draw; a negative utility
            val = dataclasses.replace(val, transition_costs={"progression": 1500.0 + 100 * d, "death_sick": 700.0 * d,
                                                             "background death": 50.0},
                                      utilities={"healthy": 0.9, "sick": -0.2}, discount_costs=0.05)
        out.append(dataclasses.replace(m, valuation=val))
    return out


VARIANTS = ["fixture", "per-draw rates", "undiscounted", "no one-off costs", "per-draw one-off costs",
            "short horizon"]


def _sojourns(model, events, patients, strategy, first):
    """Every sojourn of the strategy's patients (patient, state, t0, t1), rebuilt with pandas."""
    ev = events[events["strategy"] == strategy]
    pt = patients[patients["strategy"] == strategy]
    names = list(model.state_names)
    moves = pd.DataFrame({"patient": ev["patient"].to_numpy() - first,
                          "state": [names.index(s) for s in ev["from_state"].astype(str)],
                          "t0": ev.groupby("patient", observed=True)["time"].shift(1, fill_value=0.0).to_numpy(),
                          "t1": ev["time"].to_numpy()})
    last = ev.groupby("patient", observed=True)["time"].max()
    finals = pd.DataFrame({"patient": pt["patient"].to_numpy() - first,
                           "state": [names.index(s) for s in pt["final_state"].astype(str)],
                           "t0": last.reindex(pt["patient"].to_numpy(), fill_value=0.0).to_numpy(),
                           "t1": pt["exit_time"].to_numpy()})
    return pd.concat([moves, finals], ignore_index=True), ev


def _reference(model, events, patients, strategy, first, n, values: Valuations) -> pd.DataFrame:
    """Each patient's outcomes by pandas group-by sums over the sojourns, the discounted years by the
    difference form of the integral of exp(-delta t) (not the expm1 form the code uses)."""
    soj, ev = _sojourns(model, events, patients, strategy, first)
    draw = soj["patient"].to_numpy() // n
    state = soj["state"].to_numpy()
    t0, t1 = soj["t0"].to_numpy(), soj["t1"].to_numpy()
    length = t1 - t0

    def discounted(rates):
        delta = np.log1p(rates)[draw]
        with np.errstate(divide="ignore", invalid="ignore"):
            d = (np.exp(-delta * t0) - np.exp(-delta * t1)) / delta
        return np.where(delta > 0.0, d, length)

    alive = np.array([not s.absorbing for s in model.states])[state]
    de, dc = discounted(values.discount_effects), discounted(values.discount_costs)
    u, c = values.utility[draw, state], values.state_cost[draw, state]
    soj = soj.assign(life_years=length * alive, life_years_discounted=de * alive, qalys=length * u,
                     qalys_discounted=de * u, costs=length * c, costs_discounted=dc * c)
    # one-off costs by transition name (the model's exit numbering looked up by name)
    exits = list(model.exit_names)
    e_pid = ev["patient"].to_numpy() - first
    e_draw = e_pid // n
    cost = values.exit_cost[e_draw, [exits.index(x) for x in ev["transition"].astype(str)]]
    one = pd.DataFrame({"patient": e_pid, "costs": cost,
                        "costs_discounted": cost * np.exp(-np.log1p(values.discount_costs)[e_draw] * ev["time"].to_numpy())})
    total = pd.concat([soj[["patient", *OUTCOMES]], one], ignore_index=True).fillna(0.0)
    return total.groupby("patient").sum().reindex(np.arange(patients["strategy"].eq(strategy).sum()), fill_value=0.0)


def _block(variant: str, first_draw: int = 0, draws: int = DRAWS):
    models = _models(variant)[first_draw:first_draw + draws]  # draw d's model whatever the block
    events, patients = simulate_draws(models, 4, N, first_draw=first_draw)
    return models, events, patients


@pytest.mark.parametrize("variant", ["fixture", "per-draw rates", "per-draw one-off costs"])
def test_valuations_are_the_models_own_values(variant):
    # rows of Model.state_values / Model.exit_costs (valuation plus strategy), read in one pass
    models = _models(variant)
    for s in models[0].strategy_names:
        v = Valuations.of(models, s)
        pairs = [m.state_values(s) for m in models]
        assert np.array_equal(v.utility, [u for u, _ in pairs]) and np.array_equal(v.state_cost, [c for _, c in pairs])
        assert np.array_equal(v.exit_cost, [m.exit_costs(s) for m in models])
        assert np.array_equal(v.discount_costs, [m.valuation.discount_costs for m in models])
        assert np.array_equal(v.discount_effects, [m.valuation.discount_effects for m in models])


@pytest.mark.parametrize("variant", VARIANTS)
def test_per_patient_outcomes_match_a_pandas_group_by(variant):
    models, events, patients = _block(variant)
    for s in models[0].strategy_names:
        values = Valuations.of(models, s)
        got = block_outcomes(models[0], s, events, patients, 0, N, values)
        ref = _reference(models[0], events, patients, s, 0, N, values)
        for o in OUTCOMES:
            assert got[o].shape == (DRAWS * N,)
            np.testing.assert_allclose(got[o], ref[o].to_numpy(), rtol=1e-12, atol=1e-9, err_msg=f"{variant} {s} {o}")
    if variant == "short horizon":  # the case of patients without a move is exercised
        moved = events["patient"].nunique()
        assert moved < patients["patient"].nunique()


def test_discounted_years_match_quad():
    # per-draw rates: each patient's discounted life years are the integral of exp(-delta t) over its
    # time alive (scipy.integrate.quad on each sojourn)
    models, events, patients = _block("per-draw rates")
    s = models[0].strategy_names[1]
    values = Valuations.of(models, s)
    got = block_outcomes(models[0], s, events, patients, 0, N, values)["life_years_discounted"]
    soj, _ = _sojourns(models[0], events, patients, s, 0)
    alive = {j for j, st in enumerate(models[0].states) if not st.absorbing}
    for p in range(0, DRAWS * N, 23):
        delta = float(np.log1p(values.discount_effects[p // N]))
        rows = soj[(soj["patient"] == p) & soj["state"].isin(alive)]
        expected = sum(integrate.quad(lambda t: np.exp(-delta * t), a, b, epsabs=1e-13, epsrel=1e-13)[0]
                       for a, b in zip(rows["t0"], rows["t1"]))
        assert got[p] == pytest.approx(expected, rel=1e-11, abs=1e-12)


def test_draw_means_match_pandas_statistics():
    models, events, patients = _block("per-draw one-off costs")
    names = models[0].strategy_names
    values = {s: block_outcomes(models[0], s, events, patients, 0, N, Valuations.of(models, s)) for s in names}
    base, other = values[names[0]], values[names[1]]
    means = draw_means(other, N, base)
    own = draw_means(base, N, base)
    draw = np.arange(DRAWS * N) // N
    for o in OUTCOMES:
        frame = pd.DataFrame({"draw": draw, "x": other[o], "d": other[o] - base[o]})
        g = frame.groupby("draw")
        np.testing.assert_allclose(means[o], g["x"].mean(), rtol=1e-13)
        np.testing.assert_allclose(means[f"{o}_mcse"], g["x"].std(ddof=1) / np.sqrt(N), rtol=1e-10)
        np.testing.assert_allclose(means[f"{o}_mcse_paired"], g["d"].std(ddof=1) / np.sqrt(N), rtol=1e-10, atol=1e-13)
        assert np.all(own[f"{o}_mcse_paired"] == 0.0)  # the comparator against itself
    single = draw_means({o: other[o][:DRAWS] for o in OUTCOMES}, 1, {o: base[o][:DRAWS] for o in OUTCOMES})
    assert np.all(np.isnan(single["qalys_mcse"])) and np.all(np.isnan(single["qalys_mcse_paired"]))


@pytest.mark.parametrize("variant", ["per-draw rates", "per-draw one-off costs", "short horizon"])
def test_same_bits_whatever_the_block_and_the_workspace(variant):
    # draws 0..4 in one block, or as blocks 0..1 and 2..4 valued with one workspace reused (a large
    # block first, then smaller ones: views of its buffers) and with fresh workspaces
    whole_models, whole_ev, whole_pt = _block(variant)
    ws = Workspace()
    kept = strategy_outcomes(whole_models[0], block_rows(whole_ev, whole_pt, 0)[whole_models[0].strategy_names[0]], N,
                             Valuations.of(whole_models, whole_models[0].strategy_names[0]), ws, keep="outcomes")
    assert all(kept[o].base is not None for o in OUTCOMES)  # views of the workspace's buffer
    for s in whole_models[0].strategy_names:
        rows = block_rows(whole_ev, whole_pt, 0)
        whole = strategy_outcomes(whole_models[0], rows[s], N, Valuations.of(whole_models, s), ws)
        parts = []
        for first, draws in ((0, 2), (2, 3)):
            models, ev, pt = _block(variant, first, draws)
            values = Valuations.of(models, s)
            reused = strategy_outcomes(models[0], block_rows(ev, pt, first * N)[s], N, values, ws)
            fresh = block_outcomes(models[0], s, ev, pt, first * N, N, values)
            for o in OUTCOMES:
                assert reused[o].tobytes() == fresh[o].tobytes()
            parts.append(reused)
        for o in OUTCOMES:
            assert np.concatenate([p[o] for p in parts]).tobytes() == whole[o].tobytes(), (s, o)
        if s == whole_models[0].strategy_names[0]:  # the outcomes kept in the workspace: the same bits
            assert all(kept[o].tobytes() == whole[o].tobytes() for o in OUTCOMES)


@pytest.mark.parametrize("patients, draws, workers", [
    (1000, 1000, 1), (1000, 1000, 2), (1000, 1000, 3), (1000, 200, 2), (100, 1000, 2), (0, 50, 2),
    (10**6, 7, 2), (1000, 3, 4), (150, 24, 1)])
def test_block_sizes_keep_workers_balanced(patients, draws, workers):
    size = block_draws_for(patients, draws, workers)
    blocks = -(-draws // size)
    assert size >= 1
    if draws >= 4 * workers:
        assert blocks >= 4 * workers  # progress
    if size > 1:  # not limited by the draws: a multiple of the workers (or a last block cut short)
        assert blocks % workers == 0 or draws % size != 0
    if patients and size > 1:
        assert size * patients < TARGET_BLOCK_PATIENTS + patients * workers  # blocks of at most ~the target
    # 1,000 draws x 1,000 patients (the workload): 100 draws a block, 10 blocks
    if (patients, draws) == (1000, 1000) and workers in (1, 2):
        assert size == 100


def test_a_block_run_with_its_source_apart_gives_the_same_rows():
    model = markov_model(background=True)
    jobs = psa_jobs(model, draws_table(6), apply_values, 40, 3, block_draws=3)
    for job in jobs:
        apart = run_block(without_source(job), job.source)
        assert without_source(job).source is None
        assert table_hash(apart.table) == table_hash(run_block(job).table)


def test_local_worker_processes_get_the_allocator_settings(monkeypatch):
    from dask.distributed import Client

    from sim.distributed.cluster import WORKER_MALLOC_ENV, local_cluster

    # as left in this process by an earlier cluster started with Dask's defaults (its nannies write
    # their settings into the parent's environment, which Dask lets override the configuration)
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    cluster = local_cluster(1, processes=True)
    try:
        with Client(cluster) as client:
            seen = client.run(lambda: {k: os.environ.get(k) for k in WORKER_MALLOC_ENV})
    finally:
        cluster.close()
    assert list(seen.values()) == [WORKER_MALLOC_ENV]
    assert os.environ["MALLOC_TRIM_THRESHOLD_"] == "65536"  # this process's environment put back

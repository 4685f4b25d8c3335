"""Summaries from exact sums (sim.analysis.OutcomeAccumulator): a local run (streamed, as ``hazardtrace
run``, or kept in memory) and a run on Dask with 1 or 2 workers write bit-identical summary and
increment tables, whatever the chunk size; the accumulator's numbers are the exactly rounded values
computed with Python's fractions module and agree with numpy on the per-patient table.
Cluster: two worker processes on the loopback interface, started here and closed."""

from __future__ import annotations

import dataclasses
import math
import re
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

from sim.analysis import OutcomeAccumulator, incremental, summarise
from sim.analysis.exact_sums import MAX_EXPONENT, SCALE_BITS, as_fraction, exact_sums, two_product
from sim.cli.commands import main
from sim.distributed import run_distributed
from sim.io.demo import SCENARIO_DIR
from sim.pipeline import RunPlan, run_plan

N, SEED = 3000, 5
SCENARIO = SCENARIO_DIR / "lanthic_syndrome.toml"



def _plan(scenario, chunk: int, workers: int) -> RunPlan:
    return dataclasses.replace(RunPlan.from_scenario(scenario, patients=N, seed=SEED, workers=workers),
                               chunk_size=chunk)


@pytest.fixture(scope="module")
def memory_run(lanthic):
    """The in-memory run (whole log, per-patient outcomes) with a chunk size unlike the Dask runs'."""
    return run_plan(lanthic, _plan(lanthic, 700, 1), study=False)


def _read(path):
    return pd.read_csv(path, float_precision="round_trip")


def test_cli_local_and_dask_runs_write_bit_identical_summaries(loopback_scheduler, tmp_path, capsys):
    common = ["run", str(SCENARIO), "--patients", str(N), "--seed", str(SEED), "--no-study"]
    assert main(common + ["--output", str(tmp_path / "local")]) == 0, capsys.readouterr().err
    assert main(common + ["--scheduler", loopback_scheduler, "--output", str(tmp_path / "dask")]) == 0, capsys.readouterr().err
    for name in ("summary.csv", "increments.csv"):
        local, dask = _read(tmp_path / "local" / name), _read(tmp_path / "dask" / name)
        assert len(local) > 0
        pd.testing.assert_frame_equal(dask, local, check_exact=True)


@pytest.mark.parametrize("workers, chunk", [(1, 1000), (2, 1000), (2, 400)])
def test_dask_run_equals_the_memory_run_bit_for_bit(lanthic, memory_run, loopback_scheduler, tmp_path, workers, chunk):
    plan = _plan(lanthic, chunk, workers)
    if workers == 1:  # a one-worker cluster of this process (threads), as --workers 1 on a laptop would be
        got = run_distributed(lanthic, plan, tmp_path / "run", processes=False, study=False)
    else:
        got = run_distributed(lanthic, plan, tmp_path / "run", scheduler=loopback_scheduler, study=False)
    pd.testing.assert_frame_equal(got.outcomes, memory_run.outcomes, check_exact=True)
    pd.testing.assert_frame_equal(got.increments, memory_run.increments, check_exact=True)
    pd.testing.assert_frame_equal(_read(tmp_path / "run" / "summary.csv"),
                                  _read_back(memory_run.outcomes, tmp_path), check_exact=True)


def _read_back(table: pd.DataFrame, tmp_path) -> pd.DataFrame:
    from sim.io.export import write_tidy_csv

    write_tidy_csv(table, tmp_path / "memory_summary.csv")
    return _read(tmp_path / "memory_summary.csv")


def _exact_mean_mcse(x: np.ndarray) -> tuple[float, float]:
    """Mean and s / sqrt(n) of x in rational arithmetic (fractions), each rounded once."""
    q = [Fraction(v) for v in x]
    n = len(q)
    mean = sum(q) / n
    var = sum((v - mean) ** 2 for v in q) / (n - 1)
    return float(mean), math.sqrt(float(var / n))


def test_merged_partitions_are_exact_and_agree_with_numpy(memory_run):
    per = memory_run.per_patient
    comparator, wtp = "usual care", 30_000.0
    strategies = list(dict.fromkeys(per["strategy"]))
    assert comparator in strategies and len(strategies) == 2
    # partitions of uneven size, merged in reverse order: the same state as the whole table at once
    patients = np.sort(per["patient"].unique())
    cuts = np.split(patients, [7, 1000, 1001, 2500])
    parts = [OutcomeAccumulator(comparator, wtp).add(per[per["patient"].isin(c)]) for c in cuts]
    merged = OutcomeAccumulator.combine(reversed(parts))
    whole = OutcomeAccumulator(comparator, wtp).add(per)
    pd.testing.assert_frame_equal(merged.summary(), whole.summary(), check_exact=True)
    pd.testing.assert_frame_equal(merged.increments(), whole.increments(), check_exact=True)
    pd.testing.assert_frame_equal(merged.summary(), summarise(per), check_exact=True)
    pd.testing.assert_frame_equal(merged.increments(), incremental(per, comparator, wtp), check_exact=True)

    summary = merged.summary().set_index(["strategy", "outcome"])
    for (strategy, outcome), row in summary.iterrows():
        x = per.loc[per["strategy"] == strategy, outcome].to_numpy()
        assert row["n"] == x.size
        # numpy (pairwise summation): equal to rounding
        assert row["mean"] == pytest.approx(np.mean(x), rel=1e-13, abs=1e-300)
        assert row["mcse"] == pytest.approx(np.std(x, ddof=1) / np.sqrt(x.size), rel=1e-12, abs=1e-300)
        # Python's fractions: the exactly rounded values, bit for bit
        if outcome in ("costs_discounted", "qalys_discounted", "years in lanthic"):
            assert (row["mean"], row["mcse"]) == _exact_mean_mcse(x)

    inc = merged.increments().set_index("quantity")
    base = per[per["strategy"] == comparator].set_index("patient")
    other = per[per["strategy"] != comparator].set_index("patient")
    dc = other["costs_discounted"].to_numpy() - base["costs_discounted"].to_numpy()
    de = other["qalys_discounted"].to_numpy() - base["qalys_discounted"].to_numpy()
    n = dc.size
    # exact differences of the outcomes (not of their rounded differences): fractions
    dc_exact = [Fraction(a) - Fraction(b) for a, b in zip(other["costs_discounted"], base["costs_discounted"])]
    assert inc.loc["delta_costs", "value"] == float(sum(dc_exact) / n)
    assert inc.loc["delta_costs", "value"] == pytest.approx(dc.mean(), rel=1e-12)
    assert inc.loc["delta_effects", "value"] == pytest.approx(de.mean(), rel=1e-12)
    assert inc.loc["delta_costs", "mcse"] == pytest.approx(dc.std(ddof=1) / np.sqrt(n), rel=1e-12)
    assert inc.loc["delta_effects", "mcse"] == pytest.approx(de.std(ddof=1) / np.sqrt(n), rel=1e-12)
    nmb = wtp * de - dc
    assert inc.loc["nmb", "value"] == pytest.approx(nmb.mean(), rel=1e-10)
    assert inc.loc["nmb", "mcse"] == pytest.approx(nmb.std(ddof=1) / np.sqrt(n), rel=1e-10)
    icer = dc.mean() / de.mean()
    assert inc.loc["icer", "value"] == pytest.approx(icer, rel=1e-12)
    v = np.cov(dc, de, ddof=1)
    se_icer = np.sqrt((v[0, 0] - 2 * icer * v[0, 1] + icer**2 * v[1, 1]) / n) / abs(de.mean())
    assert inc.loc["icer", "mcse"] == pytest.approx(se_icer, rel=1e-10)
    unpaired = np.sqrt((other["costs_discounted"].var(ddof=1) + base["costs_discounted"].var(ddof=1)) / n)
    assert inc.loc["delta_costs", "mcse_unpaired"] == pytest.approx(unpaired, rel=1e-12)


def test_exact_sums_against_fractions():
    rng = np.random.default_rng(3)
    columns = [rng.normal(1e4, 3e3, 5000), -rng.exponential(2.0, 5000),
               np.concatenate([[5e-324, -5e-324, 2.2e-308, -0.0, 0.0, 2.0**MAX_EXPONENT], rng.normal(0, 1e-150, 100)]),
               np.array([1e16, 1.0, -1e16] * 3)]  # floating summation in any order loses the 1.0s
    for col, total in zip(columns, exact_sums(columns)):
        assert as_fraction(total) == sum(Fraction(v) for v in col)
        assert float(as_fraction(total)) == math.fsum(col)  # fsum is exactly rounded too
    assert as_fraction(exact_sums([columns[3]])[0]) == 3 and SCALE_BITS == 1074
    x = rng.normal(0, 1e3, 2000)
    y = rng.normal(5, 1, 2000)
    for a, b in ((x, x), (x, y)):
        p, e = two_product(a, b)
        assert all(Fraction(pi) + Fraction(ei) == Fraction(ai) * Fraction(bi) for pi, ei, ai, bi in zip(p, e, a, b))


@pytest.mark.parametrize("bad", [float("nan"), float("inf"), 2.0 ** (MAX_EXPONENT + 1)])
def test_exact_sums_refuse_values_they_cannot_sum_exactly(bad):
    with pytest.raises(ValueError, match=re.escape(f"value {bad!r} cannot be summed exactly")):
        exact_sums([np.array([1.0, bad])])


def test_accumulators_that_do_not_belong_together_are_refused(memory_run):
    per = memory_run.per_patient
    acc = OutcomeAccumulator("usual care", 30_000.0).add(per)
    with pytest.raises(ValueError, match="same comparator, willingness to pay"):
        acc.merge(OutcomeAccumulator("usual care", 20_000.0).add(per))
    with pytest.raises(ValueError, match="must have the same patients for paired differences"):
        shuffled = per.sample(frac=1.0, random_state=1)
        OutcomeAccumulator("usual care", 30_000.0).add(shuffled)

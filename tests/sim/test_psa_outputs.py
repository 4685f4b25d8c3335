"""What ``hazardtrace psa`` writes and prints beyond the per-draw table: the paired MCSE of each
strategy's increment (per-patient differences, common random numbers), the uncertain inputs, EVPPI
and population EVPI in the folder, and the printed tables in the report's number format."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sim.analysis import OUTCOMES, patient_outcomes
from sim.engine import SimulationResult, simulate_range
from sim.psa.draws_run import models_for_draws, simulated_vectorised
from sim.uncertainty import incremental_draws, noise_share

from .test_psa_fixtures import apply_values, draws_table, entry_spread, markov_model

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "scenarios" / "quorrel_psa.toml"


def test_paired_mcse_is_the_sd_of_per_patient_differences_over_root_n():
    # by hand: each draw simulated on its own and valued by sim.analysis.patient_outcomes; the
    # differences of the same patients' outcomes between strategies; numpy's sample SD / sqrt(n)
    model = markov_model(background=True, entry=entry_spread())
    draws = draws_table(3)
    models = models_for_draws(model, draws, apply_values)
    n, seed = 60, 17
    table = simulated_vectorised(models, draws.index, n, seed=seed)
    for d, m in enumerate(models):
        ev, pt = simulate_range(m, seed, d * n, (d + 1) * n)
        per = patient_outcomes(SimulationResult(m, seed, n, ev, pt, n, 1, {"strategies": m.strategy_names}))
        base = per[per["strategy"] == "usual"].set_index("patient")
        new = per[per["strategy"] == "new"].set_index("patient")
        rows = table[table["draw"] == d].set_index("strategy")
        for o in OUTCOMES:
            diff = (new[o] - base.loc[new.index, o]).to_numpy()
            expected = np.std(diff, ddof=1) / np.sqrt(n)
            assert rows.loc["new", f"{o}_mcse_paired"] == pytest.approx(expected, rel=1e-9, abs=1e-12)
            assert rows.loc["usual", f"{o}_mcse_paired"] == 0.0
            # positively correlated outcomes (common random numbers): below the independent bound
            assert rows.loc["new", f"{o}_mcse_paired"] < np.hypot(rows.loc["new", f"{o}_mcse"],
                                                                  rows.loc["usual", f"{o}_mcse"])


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> tuple[Path, str]:
    """A small analysis of the demo by the command line, with EVPPI and population EVPI."""
    from .test_report import _cli
    folder = tmp_path_factory.mktemp("psa_outputs") / "demo-psa"
    code, text = _cli(["psa", str(DEMO), "--draws", "40", "--patients", "200", "--workers", "1", "--output",
                       str(folder), "--population", "5000", "--years", "10",
                       "--evppi", "valuation.utilities.well, valuation.utilities.mild",
                       "--evppi", "valuation.utilities.well"])
    assert code == 0, text
    return folder, text


def test_paired_noise_share_of_increments_is_below_the_independent_bound(demo_folder):
    folder, _ = demo_folder
    table = pd.read_parquet(folder / "draws.parquet")
    sim = table[table["method"] == "simulated"]
    comparator = sim["strategy"].iloc[0]
    outcomes = ["costs_discounted", "qalys_discounted"]
    paired = incremental_draws(sim, comparator, outcomes)
    unpaired = incremental_draws(sim.drop(columns=[c for c in sim.columns if c.endswith("_mcse_paired")]),
                                 comparator, outcomes)
    assert (paired["mcse_kind"] == "paired").all() and (unpaired["mcse_kind"] == "unpaired").all()
    a = noise_share(paired, outcomes).set_index("outcome")["noise_share"]
    b = noise_share(unpaired, outcomes).set_index("outcome")["noise_share"]
    for o in outcomes:
        assert 0.0 < a[o] < b[o]


def test_folder_holds_inputs_population_evpi_and_evppi(demo_folder):
    from sim.io import load_scenario
    from sim.psa import inputs_table
    from sim.psa.summaries import reference_method
    from sim.report import load_psa_folder, read_inputs_csv
    from sim.uncertainty import evppi
    folder, _ = demo_folder
    scenario = load_scenario(DEMO)
    # the uncertain inputs as sim.psa.inputs_table gives them (CSV round trip)
    pd.testing.assert_frame_equal(read_inputs_csv(folder / "inputs.csv"), inputs_table(scenario), check_exact=False,
                                  rtol=1e-12)
    table = pd.read_parquet(folder / "draws.parquet")
    ref = reference_method(table)
    ev = pd.read_csv(folder / "evpi.csv")
    ev = ev[ev["method"] == ref].set_index("wtp")
    pop = pd.read_csv(folder / "population_evpi.csv").set_index("wtp")
    # population EVPI = per-patient EVPI x sum_{t=0}^{T-1} N / (1 + r)^t, the first year undiscounted
    # (common practice, no source); r the scenario's cost discount rate
    r = scenario.model.valuation.discount_costs
    factor = sum(5000 / (1 + r) ** t for t in range(10))
    np.testing.assert_allclose(pop["population_evpi"].to_numpy(), ev.loc[pop.index, "evpi"].to_numpy() * factor,
                               rtol=1e-12, atol=1e-6)
    # EVPPI: sim.uncertainty.evppi of the reference rows for each group, at the recorded grid
    got = pd.read_csv(folder / "evppi.csv")
    params = pd.read_parquet(folder / "parameters.parquet")
    assert list(dict.fromkeys(got["parameters"])) == ["valuation.utilities.well, valuation.utilities.mild",
                                                      "valuation.utilities.well"]
    for group, part in got.groupby("parameters", sort=False):
        want = evppi(table[table["method"] == ref], params, [k.strip() for k in group.split(",")],
                     part["wtp"].to_numpy())
        np.testing.assert_allclose(part["evppi"].to_numpy(), want["evppi"].to_numpy(), rtol=1e-12, atol=1e-9)
        assert (part["evppi"] >= 0).all() and (part["evppi"] <= part["evpi"] + 1e-9).all()  # 0 <= EVPPI <= EVPI
    # the report reads the folder's tables as recorded and computes nothing not asked for
    _, tables = load_psa_folder(folder)
    pd.testing.assert_frame_equal(tables["evppi"], got)
    pd.testing.assert_frame_equal(tables["population_evpi"], pd.read_csv(folder / "population_evpi.csv"))
    pd.testing.assert_frame_equal(tables["inputs"], read_inputs_csv(folder / "inputs.csv"))
    # asked for: computed from the recorded draws by the same function, replacing the recorded table
    _, asked = load_psa_folder(folder, population=100.0, years=1)
    np.testing.assert_allclose(asked["population_evpi"].set_index("wtp").loc[pop.index, "population_evpi"],
                               ev.loc[pop.index, "evpi"].to_numpy() * 100.0, rtol=1e-12, atol=1e-9)


def test_printed_means_follow_the_reports_number_rules(demo_folder):
    # each mean over the draws is printed to the decimal place of its MCSE's second significant
    # digit (SD / sqrt(N)), with thousands separators: e.g. "21,040 (424)", not "21,040.1206"
    from sim.analysis import decimals_from_mcse
    folder, text = demo_folder
    assert not any(len(tok.split(".")[-1]) == 4 and "," in tok for tok in text.split())  # no raw 4-decimal money
    table = pd.read_parquet(folder / "draws.parquet")
    sim = table[table["method"] == "simulated"]
    stats = sim.groupby("strategy", sort=False)["costs_discounted"].agg(["mean", "std", "size"])
    lines = [line for line in text.splitlines() if line.strip().startswith("simulated")]
    for strategy, row in stats.iterrows():
        line = next(line for line in lines if strategy in line)
        cells = line.split(strategy, 1)[1].split()
        mcse = row["std"] / np.sqrt(row["size"])
        decimals = int(decimals_from_mcse(np.array([mcse]))[0])
        assert cells[0] == f"{row['mean']:,.{decimals}f}"
        assert cells[1] == f"{mcse:,.{decimals}f}"

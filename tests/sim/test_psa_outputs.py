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
                       str(folder)])
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

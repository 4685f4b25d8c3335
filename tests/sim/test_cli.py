"""Command line end to end on each demo scenario: exit codes, files, columns, messages."""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sim.reference.study as study_module
from sim.cli.commands import main
from sim.io import load_scenario
from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.pipeline import run_scenario


def _run(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue()


@pytest.mark.parametrize("name", sorted(DEMOS))
def test_run_writes_tables_summary_and_metadata(name, tmp_path, monkeypatch):
    def no_second_simulation(*args, **kwargs):
        raise AssertionError("the error study simulated the run's histories again")

    monkeypatch.setattr(study_module, "simulate", no_second_simulation)
    scen = SCENARIO_DIR / DEMOS[name]
    folder = tmp_path / "out"
    code, text = _run(["run", str(scen), "--patients", "3000", "--threads", "1", "--output", str(folder),
                       "--format", "csv", "--long-format"])
    assert code == 0, text
    assert "simulated patients per strategy" in text and "not for clinical decisions" in text
    events = pd.read_csv(folder / "events.csv")
    patients = pd.read_csv(folder / "patients.csv")
    assert list(events.columns) == ["strategy", "patient", "time", "age", "from_state", "to_state", "transition"]
    assert len(patients) == 3000 * patients["strategy"].nunique()
    lf = pd.read_csv(folder / "long_format.csv")
    assert (lf["status"] == 1).sum() == len(events)  # one status-1 row per move
    summary = pd.read_csv(folder / "summary.csv")
    assert {"strategy", "outcome", "mean", "mcse"} <= set(summary.columns)
    study = pd.read_csv(folder / "error_study.csv", float_precision="round_trip")
    if not load_scenario(scen).model.is_markov:
        # semi-Markov: the study's reference is the run's own simulation (all its patients)
        assert "vs the simulation (3,000 patients, seed" in text
        ref = study.drop_duplicates(["strategy", "outcome"]).set_index(["strategy", "outcome"])["reference"]
        means = pd.read_csv(folder / "summary.csv", float_precision="round_trip").set_index(["strategy", "outcome"])
        np.testing.assert_array_equal(ref.to_numpy(), means.loc[ref.index, "mean"].to_numpy())
    meta = json.loads((folder / "metadata.json").read_text())
    assert meta["seed"] is not None and meta["patients"] == 3000
    assert meta["scenario_sha256"] if "scenario_sha256" in meta else meta.get("scenario_hash")
    # an existing output folder is never overwritten without --force
    code, _ = _run(["run", str(scen), "--patients", "100", "--output", str(folder), "--no-study"])
    assert code == 2
    code, _ = _run(["run", str(scen), "--patients", "100", "--output", str(folder), "--no-study", "--force"])
    assert code == 0
    assert len(pd.read_parquet(folder / "patients.parquet")) == 100 * patients["strategy"].nunique()


def test_run_summary_equals_the_windows_pipeline_run(tmp_path):
    """The command line streams its run to disk (outcomes accumulated chunk by chunk) and the window
    keeps it in memory (outcomes from every patient's row): one pipeline, the same summary (means up
    to the rounding of the accumulated sums), the same increments and the same error study."""
    scen = SCENARIO_DIR / DEMOS["lanthic"]
    code, text = _run(["run", str(scen), "--patients", "4000", "--seed", "17", "--threads", "2", "--output",
                       str(tmp_path / "out"), "--format", "csv"])
    assert code == 0, text
    window = run_scenario(load_scenario(scen), patients=4000, seed=17, workers=2)
    summary = pd.read_csv(tmp_path / "out" / "summary.csv", float_precision="round_trip")
    assert list(summary.columns) == list(window.outcomes.columns)
    for col in ("strategy", "outcome", "n"):
        assert list(summary[col]) == list(window.outcomes[col])
    np.testing.assert_array_equal(summary["exact"], window.outcomes["exact"])
    np.testing.assert_allclose(summary["mean"], window.outcomes["mean"], rtol=1e-12)
    np.testing.assert_allclose(summary["mcse"], window.outcomes["mcse"], rtol=1e-9)
    increments = pd.read_csv(tmp_path / "out" / "increments.csv", float_precision="round_trip")
    assert list(increments["quantity"]) == list(window.increments["quantity"])
    np.testing.assert_allclose(increments[["value", "exact"]], window.increments[["value", "exact"]], rtol=1e-10)
    study = pd.read_csv(tmp_path / "out" / "error_study.csv", float_precision="round_trip")
    np.testing.assert_array_equal(study["value"], window.study.table["value"])  # Markov: exact reference
    np.testing.assert_array_equal(study["reference"], window.study.table["reference"])
    assert "4,000 simulated patients per strategy (seed 17, 2 threads)" in text


def test_check_describes_the_model():
    code, text = _run(["check", str(SCENARIO_DIR / DEMOS["lanthic"])])
    assert code == 0
    for words in ("States: well, lanthic, dead (absorbing)", "onset: well -> lanthic", "time since entry",
                  "hazard ratio 0.7 on onset", "The scenario is valid."):
        assert words in text


def test_compare_writes_the_study(tmp_path):
    csv = tmp_path / "study.csv"
    code, text = _run(["compare", str(SCENARIO_DIR / DEMOS["risk-vs-rate"]), "--csv", str(csv)])
    assert code == 0, text
    table = pd.read_csv(csv)
    assert {"outcome", "strategy", "cycle_length", "method", "correction", "value", "error",
            "relative_error"} <= set(table.columns)
    assert "Largest cycle length within" in text


def test_bad_input_exits_2_with_the_message(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text((SCENARIO_DIR / DEMOS["lanthic"]).read_text().replace("rate = 0.15 ", "rate = -0.15 "))
    code, _ = _run(["check", str(bad)])
    assert code == 2
    err = capsys.readouterr().err
    assert "bad.toml:" in err and "transitions[1].rate: must be >= 0, got -0.15" in err
    code, _ = _run(["check", str(tmp_path / "missing.toml")])
    assert code == 2
    # several problems: one reading lists them all, each with its line
    bad.write_text((SCENARIO_DIR / DEMOS["lanthic"]).read_text().replace("rate = 0.15 ", "rate = -0.15 ")
                   .replace("sd = 8.0", "sd = 0.0"))
    code, _ = _run(["check", str(bad)])
    assert code == 2
    err = capsys.readouterr().err
    assert "2 problems:" in err
    assert "transitions[1].rate: must be >= 0, got -0.15" in err and "population.entry_age.sd: must be > 0" in err

"""``hazardtrace psa``: the output folder and its tables, exit codes (0, 2 for input the user can fix,
130 on Ctrl-C) and nothing half-written on a failure or cancel."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import sim.io as sim_io
from sim.cli.commands import main
from sim.distributed import cluster as dask_runner  # CONNECT_TIMEOUT
from sim.psa import table_hash

SCENARIO = """\
# Invented test scenario for the probabilistic analysis.
format_version = 1
name = "psa cli test (invented)"

[[states]]
name = "well"

[[states]]
name = "ill"

[[states]]
name = "dead"
absorbing = true

[[transitions]]
name = "onset"
from = "well"
to = "ill"
clock = "entry"
family = "exponential"
rate = 0.1

[[transitions]]
name = "death"
from = "ill"
to = "dead"
clock = "entry"
family = "exponential"
rate = 0.3

[population]
initial_state = "well"
entry_age = { distribution = "fixed", age = 50.0 }

[horizon]
value = 10
scale = "time"

[[strategies]]
name = "usual"

[[strategies]]
name = "new"
hazard_ratios = { onset = 0.7 }
state_costs = { well = 500.0 }

[valuation]
utilities = { well = 0.9, ill = 0.5 }
state_costs = { ill = 3000.0 }
willingness_to_pay = 20000

[run]
patients = 1000
seed = 5
workers = 1
cycle_lengths = ["1 year"]

[[uncertainty]]
parameter = "transitions[0].rate"
distribution = "gamma"
mean = 0.1
se = 0.02

[[uncertainty]]
parameter = "valuation.utilities.ill"
distribution = "beta"
mean = 0.5
se = 0.05
"""


@pytest.fixture
def scenario(tmp_path):
    path = tmp_path / "psa_test.toml"
    path.write_text(SCENARIO, encoding="utf-8")
    return path


def _run(scenario, out, *extra):
    return main(["psa", str(scenario), "--draws", "8", "--patients", "60", "--workers", "1", "--output", str(out),
                 *extra])


def test_writes_the_tables_and_metadata(scenario, tmp_path, capsys):
    out = tmp_path / "out"
    assert _run(scenario, out) == 0
    names = {p.name for p in out.iterdir()}
    assert {"draws.parquet", "draws.csv", "parameters.parquet", "parameters.csv", "metadata.json", "ceac.csv",
            "evpi.csv", "incremental.csv", "ce_plane.csv", "acceptability_by_method.csv"} <= names
    table = pd.read_parquet(out / "draws.parquet")
    meta = json.loads((out / "metadata.json").read_text())
    assert meta["command"] == "psa" and meta["draws"] == 8 and meta["patients"] == 60
    assert meta["draws_table_sha256"] == table_hash(table)
    assert set(table["method"]) == {"simulated", "exact", "per-transition|1.0|half-cycle",
                                    "competing-exit|1.0|half-cycle", "matrix-exponential|1.0|half-cycle"}
    params = pd.read_csv(out / "parameters.csv")
    assert list(params.columns) == ["draw", "transitions[0].rate", "valuation.utilities.ill"]
    assert np.array_equal(params["draw"], np.arange(8))
    csv = pd.read_csv(out / "draws.csv", float_precision="round_trip")
    assert np.array_equal(csv["qalys_discounted"].to_numpy(), table["qalys_discounted"].to_numpy())
    text = capsys.readouterr().out
    assert "8 parameter draws of 2 uncertain parameters" in text and "probability cost-effective" in text


def test_existing_output_needs_force(scenario, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert _run(scenario, out, "--cycles", "none") == 2
    assert "--force" in capsys.readouterr().err
    assert (out / "keep.txt").read_text() == "mine"
    assert _run(scenario, out, "--cycles", "none", "--force") == 0
    assert not (out / "keep.txt").exists() and (out / "draws.parquet").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "psa_test.toml"]


@pytest.mark.parametrize("args,words", [
    (("--scheduler", "tcp://127.0.0.1:9"), "scheduler"),
    (("--cycles", "competing-exit|1|sideways"), "correction"),
    (("--cycles", "competing-exit"), "--cycles"),
    (("--draws", "0"), "--draws"),
])
def test_bad_input_is_exit_2_and_writes_nothing(scenario, tmp_path, capsys, monkeypatch, args, words):
    monkeypatch.setattr(dask_runner, "CONNECT_TIMEOUT", "1s")
    out = tmp_path / "out"
    assert _run(scenario, out, *args) == 2
    err = capsys.readouterr().err
    assert err.startswith("hazardtrace: error:") and words in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_ctrl_c_during_the_run_leaves_nothing(scenario, tmp_path, monkeypatch):
    from sim.cli import psa as verb

    class Interrupt:
        def __init__(self, stream=None):
            pass

        def __call__(self, done, total, left):
            if done > 0:
                raise KeyboardInterrupt

    monkeypatch.setattr(verb, "EtaProgress", Interrupt)
    out = tmp_path / "out"
    assert _run(scenario, out, "--cycles", "none") == 130
    assert sorted(p.name for p in tmp_path.iterdir()) == ["psa_test.toml"]


def test_ctrl_c_while_writing_leaves_nothing(scenario, tmp_path, monkeypatch):
    from sim.psa import output

    calls = []
    real = sim_io.write_table

    def write_then_interrupt(df, path, *a, **k):
        calls.append(path)
        if len(calls) == 3:  # after two files of the folder
            raise KeyboardInterrupt
        return real(df, path, *a, **k)

    monkeypatch.setattr(output, "write_table", write_then_interrupt)
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert _run(scenario, out, "--cycles", "none", "--force") == 130
    assert len(calls) == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "psa_test.toml"]
    assert [p.name for p in out.iterdir()] == ["keep.txt"]


def test_a_scenario_without_uncertainty_says_so(tmp_path, capsys):
    path = tmp_path / "plain.toml"
    path.write_text(SCENARIO.split("[[uncertainty]]")[0], encoding="utf-8")
    assert _run(path, tmp_path / "out", "--cycles", "none", "--no-exact") == 0
    assert "declares no [[uncertainty]] inputs" in capsys.readouterr().out
    assert set(pd.read_parquet(tmp_path / "out" / "draws.parquet")["method"]) == {"simulated"}
    assert pd.read_csv(tmp_path / "out" / "parameters.csv").columns.tolist() == ["draw"]

"""Reproducing a run (issue 17): ``hazardtrace rerun`` reruns the recorded scenario copy, seed and
sizes and compares the event log's content hash; it names what differs otherwise (a changed life
table, another version). The hashes and input-file records it relies on are checked here too."""

from __future__ import annotations

import hashlib
import io
import json
import math
import shutil
from pathlib import Path

import pandas as pd
import pytest

from sim.cli.commands import main
from sim.engine import simulate_chunks
from sim.io import demo_model, demo_path
from sim.io.demo import SCENARIO_DIR
from sim.io.export import TableHash

TABLE = SCENARIO_DIR / "tables" / "synthetic_life_table.csv"


def _cli(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue()


def test_rerun_reproduces_the_demo_run_bit_identically(tmp_path):
    folder = tmp_path / "demo"
    code, text = _cli(["run", str(demo_path()), "--patients", "3000", "--threads", "2", "--no-study",
                       "--output", str(folder)])
    assert code == 0, text
    meta = json.loads((folder / "metadata.json").read_text(encoding="utf-8"))
    # the recorded hash is the hash of the recorded event log's content
    assert meta["event_log_sha256"] == TableHash.of([pd.read_parquet(folder / "events.parquet")])
    assert meta["patients_sha256"] == TableHash.of([pd.read_parquet(folder / "patients.parquet")])
    # with another number of threads too: the draws do not depend on the chunking or the workers
    for args in ([str(folder)], [str(folder / "metadata.json"), "--threads", "1"]):
        code, text = _cli(["rerun", *args])
        assert code == 0, text
        assert f"The event log is bit-identical (SHA-256 {meta['event_log_sha256']})" in text
    # a run folder written before the hash was recorded: the recorded event log itself is hashed
    without = {k: v for k, v in meta.items() if k != "event_log_sha256"}
    (folder / "metadata.json").write_text(json.dumps(without), encoding="utf-8")
    code, text = _cli(["rerun", str(folder)])
    assert code == 0 and "bit-identical" in text, text
    # a recorded version that is not this one is named (the log itself is still identical here)
    meta["tool_version"] = "0.0.1"
    (folder / "metadata.json").write_text(json.dumps(meta), encoding="utf-8")
    code, text = _cli(["rerun", str(folder)])
    assert code == 0 and "HazardTrace version: recorded 0.0.1, now" in text, text
    # a run from before the stream layout was recorded (layout 1) is named as a reason for a difference
    del meta["stream_layout"]
    (folder / "metadata.json").write_text(json.dumps(meta), encoding="utf-8")
    code, text = _cli(["rerun", str(folder)])
    assert "random-number stream layout: recorded 1, now 2" in text, text


def test_rerun_says_when_the_life_table_changed(tmp_path):
    (tmp_path / "tables").mkdir()
    scenario = tmp_path / "ferrovian.toml"
    shutil.copy(SCENARIO_DIR / "ferrovian_progression.toml", scenario)
    table = tmp_path / "tables" / TABLE.name
    shutil.copy(TABLE, table)
    folder = tmp_path / "run"
    code, text = _cli(["run", str(scenario), "--patients", "1500", "--no-study", "--output", str(folder)])
    assert code == 0, text
    meta = json.loads((folder / "metadata.json").read_text(encoding="utf-8"))
    (record,) = meta["input_files"]
    assert record["key"] == "background.life_table.file" and record["path"] == "tables/synthetic_life_table.csv"
    assert record["sha256"] == hashlib.sha256(table.read_bytes()).hexdigest()  # FIPS 180-4, by hashlib
    code, text = _cli(["rerun", str(folder)])
    assert code == 0 and "bit-identical" in text, text
    # double every death probability from age 50 on: the histories change, and the rerun says why
    frame = pd.read_csv(table)
    older = frame["age"] >= 50
    for col in ("q_female", "q_male"):
        frame.loc[older, col] = (2 * frame.loc[older, col]).clip(upper=1.0)
    frame.to_csv(table, index=False)
    code, text = _cli(["rerun", str(folder)])
    assert code == 2, text
    assert "The event log differs" in text
    assert f"input file changed: {table.resolve()} (background.life_table.file)" in text
    assert record["sha256"][:16] in text


def test_rerun_of_something_that_is_not_a_run(tmp_path):
    code, _ = _cli(["rerun", str(tmp_path)])
    assert code == 2
    (tmp_path / "metadata.json").write_text("{}", encoding="utf-8")
    code, _ = _cli(["rerun", str(tmp_path)])
    assert code == 2


@pytest.mark.parametrize("piece", [1, 37, 200, 10_000])
def test_table_hash_does_not_depend_on_how_the_rows_arrive(piece):
    """The hash of a table fed in pieces of any size equals that of the whole (the run writer feeds it
    chunk by chunk; the row order itself is the run's, fixed by the recorded chunk size)."""
    events = pd.concat([e for e, _ in simulate_chunks(demo_model(), 300, 11, chunk_size=37)], ignore_index=True)
    pieces = [events.iloc[i:i + piece] for i in range(0, len(events), piece)]
    assert TableHash.of(pieces) == TableHash.of([events])
    changed = events.copy()
    t = float(changed["time"].iloc[3])
    changed.loc[3, "time"] = t + math.ulp(t)  # one bit of one time
    assert TableHash.of([changed]) != TableHash.of([events])
    relabelled = events.copy()
    relabelled["strategy"] = relabelled["strategy"].cat.rename_categories(["usual care", "other therapy"])
    assert TableHash.of([relabelled]) != TableHash.of([events])  # the labels count, not only the codes

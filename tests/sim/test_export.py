"""Tests of sim.io.export: the multi-state long format, atomic table writes and streamed runs.

Long-format layout: Putter, Fiocco & Geskus 2007, Stat Med 26(11):2389-2430 (section 4); the msprep
layout of de Wreede, Fiocco & Putter 2011, J Stat Softw 38(7).
"""

from __future__ import annotations

import json
import os
import pickle
import stat
import tracemalloc
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import sim
from sim.problems import NO_VALUE, ValidationError
from sim.engine.histories import simulate, simulate_chunks
from sim.analysis import per_patient_time_in_states
from sim.io.export import (
    LONG_FORMAT_COLUMNS,
    ExportError,
    RunWriter,
    long_format,
    metadata_for,
    write_run,
    write_table,
    write_tidy_csv,
)
from sim.model.multistate import Horizon, ModelError, Strategy

from .conftest import illness_death

STATES = ["healthy", "sick", "dead"]
EXITS = ["onset", "recovery", "disease death", "background death"]
BG = "background death"


def two_strategy_model():
    return illness_death(Horizon(30.0, "time"),
                         strategies=(Strategy("usual care"), Strategy("treat", hazard_ratios={"onset": 0.6})))


def expected_frame(rows, strategies=("base",)) -> pd.DataFrame:
    """Long-format frame with the dtypes long_format promises, from hand-written tuples
    (strategy, patient, from, to, transition, start, stop, status)."""
    df = pd.DataFrame(rows, columns=list(LONG_FORMAT_COLUMNS))
    return df.assign(
        strategy=pd.Categorical(df["strategy"], categories=list(strategies)),
        patient=df["patient"].astype(np.int64),
        from_state=pd.Categorical(df["from_state"], categories=STATES),
        to_state=pd.Categorical(df["to_state"], categories=STATES),
        transition=pd.Categorical(df["transition"], categories=EXITS),
        start=df["start"].astype(np.float64),
        stop=df["stop"].astype(np.float64),
        status=df["status"].astype(np.int8),
    )


def cat(values, categories) -> pd.Categorical:
    return pd.Categorical(values, categories=categories)


def hand_tables():
    """Two hand-made patients of the illness-death model (plain string columns)."""
    events = pd.DataFrame({
        "strategy": ["base", "base"],
        "patient": [1, 1],
        "time": [2.0, 5.0],
        "age": [62.0, 65.0],
        "from_state": ["healthy", "sick"],
        "to_state": ["sick", "dead"],
        "transition": ["onset", "disease death"],
    })
    patients = pd.DataFrame({
        "strategy": ["base", "base"],
        "patient": [1, 2],
        "entry_age": [60.0, 50.0],
        "sex": ["female", "male"],
        "initial_state": ["healthy", "healthy"],
        "exit_time": [5.0, 10.0],
        "exit_age": [65.0, 60.0],
        "final_state": ["dead", "healthy"],
        "exit_reason": ["absorbed", "censored"],
    })
    return events, patients


# =========================================================================== long format, by hand
def test_long_format_two_patients_by_hand():
    model = illness_death()
    events, patients = hand_tables()
    # Exits (model.resolve): healthy -> [onset (to sick), background death (to dead)];
    # sick -> [recovery (to healthy), disease death (to dead), background death (to dead)].
    # Patient 1: healthy over (0, 2], left by onset at 2 -> onset status 1, background death 0.
    #            sick over (2, 5], left by disease death at 5 -> disease death 1, the other two 0.
    #            dead from 5: absorbing, no rows.
    # Patient 2: healthy over (0, 10], censored at 10 -> both exits of healthy with status 0.
    expected = expected_frame([
        ("base", 1, "healthy", "sick", "onset", 0.0, 2.0, 1),
        ("base", 1, "healthy", "dead", BG, 0.0, 2.0, 0),
        ("base", 1, "sick", "healthy", "recovery", 2.0, 5.0, 0),
        ("base", 1, "sick", "dead", "disease death", 2.0, 5.0, 1),
        ("base", 1, "sick", "dead", BG, 2.0, 5.0, 0),
        ("base", 2, "healthy", "sick", "onset", 0.0, 10.0, 0),
        ("base", 2, "healthy", "dead", BG, 0.0, 10.0, 0),
    ])
    pd.testing.assert_frame_equal(long_format(events, patients, model), expected)


def test_long_format_recovery_loop_two_strategies_shuffled_rows():
    model = two_strategy_model()
    strategies = ["usual care", "treat"]
    # usual care, patient 7: healthy (0, 1] -> onset; sick (1, 3] -> recovery; healthy (3, 4.5] ->
    #   background death. treat, patient 7: healthy the whole time, censored at 30.
    # treat, patient 0: followed for 0 years (exit_time 0, censored): an empty interval, no rows.
    events = pd.DataFrame({  # rows deliberately out of time order
        "strategy": cat(["usual care"] * 3, strategies),
        "patient": np.array([7, 7, 7], dtype=np.int64),
        "time": [4.5, 1.0, 3.0],
        "from_state": cat(["healthy", "healthy", "sick"], STATES),
        "to_state": cat(["dead", "sick", "healthy"], STATES),
        "transition": cat([BG, "onset", "recovery"], EXITS),
    })
    patients = pd.DataFrame({
        "strategy": cat(["treat", "usual care", "treat"], strategies),
        "patient": np.array([7, 7, 0], dtype=np.int64),
        "initial_state": cat(["healthy"] * 3, STATES),
        "exit_time": [30.0, 4.5, 0.0],
        "final_state": cat(["healthy", "dead", "healthy"], STATES),
        "exit_reason": cat(["censored", "absorbed", "censored"], ["absorbed", "censored"]),
    })
    expected = expected_frame([
        ("usual care", 7, "healthy", "sick", "onset", 0.0, 1.0, 1),
        ("usual care", 7, "healthy", "dead", BG, 0.0, 1.0, 0),
        ("usual care", 7, "sick", "healthy", "recovery", 1.0, 3.0, 1),
        ("usual care", 7, "sick", "dead", "disease death", 1.0, 3.0, 0),
        ("usual care", 7, "sick", "dead", BG, 1.0, 3.0, 0),
        ("usual care", 7, "healthy", "sick", "onset", 3.0, 4.5, 0),
        ("usual care", 7, "healthy", "dead", BG, 3.0, 4.5, 1),
        ("treat", 7, "healthy", "sick", "onset", 0.0, 30.0, 0),
        ("treat", 7, "healthy", "dead", BG, 0.0, 30.0, 0),
    ], strategies=strategies)
    pd.testing.assert_frame_equal(long_format(events, patients, model), expected)
    only = long_format(events, patients, model, strategy="treat")
    pd.testing.assert_frame_equal(only, expected.iloc[7:].reset_index(drop=True))
    with pytest.raises(ModelError, match="strategy must be one of"):
        long_format(events, patients, model, strategy="nonexistent")


def _broken(column_table: str, index: int, column: str, value):
    events, patients = hand_tables()
    target = events if column_table == "events" else patients
    target.loc[index, column] = value
    return events, patients


@pytest.mark.parametrize("table, index, column, value, message", [
    ("events", 1, "from_state", "healthy", "is not the state the patient is in"),
    ("events", 0, "transition", "recovery", "is not an exit of state 'healthy'"),
    ("events", 1, "to_state", "healthy", "is not the target of this exit"),
    ("events", 1, "time", 6.0, "after the patient's exit_time"),
    ("events", 1, "time", 2.0, "strictly after the previous move"),
    ("events", 0, "time", 0.0, "strictly after the previous move or entry"),
    ("events", 0, "patient", 9, "id 9 .* has no row in patients"),
    ("events", 0, "transition", "relapse", "not one of the model's exits"),
    ("events", 0, "to_state", "limbo", "not one of the model's states"),
    ("patients", 1, "patient", 1, "appears twice"),
    ("patients", 1, "final_state", "sick", "contradicts the log"),
    ("patients", 0, "exit_reason", "censored", "contradicts the log"),
    ("patients", 0, "strategy", "other", "not one of the model's strategies"),
])
def test_long_format_rejects_inconsistent_logs(table, index, column, value, message):
    events, patients = _broken(table, index, column, value)
    with pytest.raises(ExportError, match=message) as info:
        long_format(events, patients, illness_death())
    # the same facts as data (sim.problems): the column at fault and the value received
    assert isinstance(info.value, ValidationError)
    (problem,) = info.value.problems
    assert problem.path == (table, column)
    assert problem.value == value


def test_long_format_requires_columns():
    events, patients = hand_tables()
    with pytest.raises(ExportError, match=r"missing column\(s\) \['exit_time'\]"):
        long_format(events, patients.drop(columns="exit_time"), illness_death())


# =========================================================================== long format, simulated
def test_long_format_matches_simulated_log():
    model = two_strategy_model()
    run = simulate(model, 4000, seed=20240611)
    ev, pt = run.events, run.patients
    lf = long_format(ev, pt, model)
    assert list(lf.columns) == list(LONG_FORMAT_COLUMNS)

    # status == 1 rows are exactly the logged events (patient, time, from, to, transition)
    hits = lf[lf["status"] == 1]
    assert len(hits) == len(ev)
    key = ["strategy", "patient", "from_state", "to_state", "transition"]
    got = hits[key + ["stop"]].rename(columns={"stop": "time"}).reset_index(drop=True)
    want = ev.sort_values(["strategy", "patient", "time"], kind="stable")[key + ["time"]].reset_index(drop=True)
    pd.testing.assert_frame_equal(got, want)

    # at most one event per sojourn; every row of a sojourn carries the state's whole exit list
    per_sojourn = lf.groupby(["strategy", "patient", "start"], observed=True)
    assert per_sojourn["status"].sum().max() == 1
    sizes = per_sojourn.agg(n=("status", "size"), state=("from_state", "first"))
    n_exits = sizes["state"].astype(str).map(lambda s: len(model.exits_of(s)))
    np.testing.assert_array_equal(sizes["n"].to_numpy(), n_exits.to_numpy())
    assert (lf["stop"] > lf["start"]).all()

    # time at risk through any one exit of a state = time spent in that state, patient by patient
    # (independent computation: sim.analysis.per_patient_time_in_states)
    for strategy in model.strategy_names:
        expected = per_patient_time_in_states(ev, pt, model.state_names, strategy=strategy)
        rows = lf[lf["strategy"] == strategy]
        for state in ("healthy", "sick"):
            for exit_name in model.exits_of(state):
                sel = rows[(rows["from_state"] == state) & (rows["transition"] == exit_name)]
                at_risk = (sel["stop"] - sel["start"]).groupby(sel["patient"]).sum()
                at_risk = at_risk.reindex(expected.index, fill_value=0.0)
                np.testing.assert_allclose(at_risk.to_numpy(), expected[state].to_numpy(), rtol=1e-12, atol=1e-12)


# =========================================================================== single tables
@pytest.fixture
def small_run():
    model = two_strategy_model()
    return model, simulate(model, 600, seed=7)


def test_parquet_round_trip_keeps_categories(tmp_path, small_run):
    model, run = small_run
    path = write_table(run.events, tmp_path / "events.parquet")
    back = pd.read_parquet(path)
    pd.testing.assert_frame_equal(back, run.events)  # dtypes included: categories and their order
    lf = long_format(run.events, run.patients, model)
    back_lf = pd.read_parquet(write_table(lf, tmp_path / "lf.data", fmt="parquet"))
    pd.testing.assert_frame_equal(back_lf, lf)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["events.parquet", "lf.data"]


def test_csv_round_trip_values(tmp_path, small_run):
    _, run = small_run
    path = write_table(run.patients, tmp_path / "patients.csv")
    back = pd.read_csv(path, float_precision="round_trip")
    want = run.patients.astype({c: object for c in run.patients.select_dtypes("category").columns})
    pd.testing.assert_frame_equal(back, want, check_dtype=False)
    # floats are bit-identical, not just close
    np.testing.assert_array_equal(back["exit_time"].to_numpy(), run.patients["exit_time"].to_numpy())


def test_write_table_refuses_existing_and_force_replaces(tmp_path):
    df = pd.DataFrame({"a": [1, 2]})
    path = tmp_path / "t.csv"
    path.write_text("old\n")
    with pytest.raises(ExportError, match=r"t\.csv exists; pass force=True \(--force\) to overwrite"):
        write_table(df, path)
    assert path.read_text() == "old\n"
    write_table(df, path, force=True)
    assert path.read_text() == "a\n1\n2\n"
    assert [p.name for p in tmp_path.iterdir()] == ["t.csv"]


def test_write_table_failure_leaves_old_file_and_no_temp(tmp_path):
    path = tmp_path / "t.parquet"
    path.write_bytes(b"old")
    unconvertible = pd.DataFrame({"a": [object(), object()]})  # pyarrow cannot convert this
    with pytest.raises(pa.ArrowInvalid):
        write_table(unconvertible, path, force=True)
    assert path.read_bytes() == b"old"
    assert [p.name for p in tmp_path.iterdir()] == ["t.parquet"]


@pytest.mark.parametrize("name, fmt, message", [
    ("t.xlsx", None, "cannot tell the format from the suffix"),
    ("t.csv", "feather", "format 'feather' is not supported"),
    ("missing/t.csv", None, "does not exist; create it first"),
])
def test_write_table_bad_destinations(tmp_path, name, fmt, message):
    with pytest.raises(ExportError, match=message):
        write_table(pd.DataFrame({"a": [1]}), tmp_path / name, fmt=fmt)


def test_write_tidy_csv(tmp_path, small_run):
    model, run = small_run
    per = per_patient_time_in_states(run.events, run.patients, model.state_names, strategy="treat")
    path = write_tidy_csv(per, tmp_path / "time_in_states.csv")
    back = pd.read_csv(path, float_precision="round_trip")
    assert list(back.columns) == ["patient", *model.state_names]  # the named index became a column
    np.testing.assert_array_equal(back["patient"].to_numpy(), per.index.to_numpy())
    np.testing.assert_array_equal(back[list(model.state_names)].to_numpy(), per.to_numpy())
    tidy = pd.DataFrame({"time": [0.0, 1.0], "probability": [1.0, 0.9]})
    back = pd.read_csv(write_tidy_csv(tidy, tmp_path / "occ.csv"))
    pd.testing.assert_frame_equal(back, tidy)  # default index dropped
    with pytest.raises(ExportError, match="2 column levels"):
        write_tidy_csv(tidy.set_axis(pd.MultiIndex.from_tuples([("a", "x"), ("a", "y")]), axis=1),
                       tmp_path / "wide.csv")
    with pytest.raises(ExportError, match="exists"):
        write_tidy_csv(tidy, tmp_path / "occ.csv")


# =========================================================================== streamed runs
def _sorted(df: pd.DataFrame, by: list[str]) -> pd.DataFrame:
    return df.sort_values(by, kind="stable").reset_index(drop=True)


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_write_run_equals_simulate(tmp_path, fmt):
    model = two_strategy_model()
    n, seed, chunk = 2500, 99, 600
    seen: list[tuple[int, int | None]] = []
    paths = write_run(tmp_path / "run", simulate_chunks(model, n, seed, chunk_size=chunk), fmt=fmt,
                      metadata=metadata_for("scenario text", seed, n), long_format_model=model,
                      progress=lambda done, total: seen.append((done, total)))
    assert seen == [(600, n), (1200, n), (1800, n), (2400, n), (2500, n)]
    assert set(paths) == {"events", "patients", "long_format", "metadata"}
    assert sorted(p.name for p in (tmp_path / "run").iterdir()) == sorted(
        [f"events.{fmt}", f"patients.{fmt}", f"long_format.{fmt}", "metadata.json"])
    assert [p.name for p in tmp_path.iterdir()] == ["run"]  # no temporary folder left behind

    whole = simulate(model, n, seed)
    lf_whole = long_format(whole.events, whole.patients, model)
    # chunks come patient-range by patient-range; simulate() orders by strategy first
    want = {"events": _sorted(whole.events, ["strategy", "patient", "time"]),
            "patients": _sorted(whole.patients, ["strategy", "patient"]),
            "long_format": _sorted(lf_whole, ["strategy", "patient", "start"])}
    by = {"events": ["strategy", "patient", "time"], "patients": ["strategy", "patient"],
          "long_format": ["strategy", "patient", "start"]}
    for name, expected in want.items():
        if fmt == "parquet":
            back = _sorted(pd.read_parquet(paths[name]), by[name])
            pd.testing.assert_frame_equal(back, expected)
            assert pq.ParquetFile(paths[name]).metadata.num_row_groups == 5  # one per chunk
        else:
            back = pd.read_csv(paths[name], float_precision="round_trip")
            cats = {c: pd.CategoricalDtype(expected[c].cat.categories) for c in expected.select_dtypes("category")}
            back = _sorted(back.astype(cats), by[name])
            pd.testing.assert_frame_equal(back, expected, check_dtype=False)
    meta = json.loads(paths["metadata"].read_text(encoding="utf-8"))
    assert meta["files"] == [
        {"name": f"events.{fmt}", "table": "events", "rows": len(whole.events)},
        {"name": f"patients.{fmt}", "table": "patients", "rows": len(whole.patients)},
        {"name": f"long_format.{fmt}", "table": "long_format", "rows": len(lf_whole)},
    ]
    assert meta["format"] == fmt and meta["chunks"] == 5


def test_metadata_json_content(tmp_path):
    model = illness_death()
    # "abc" -> SHA-256 test vector from FIPS 180-2, Appendix B.1
    meta = metadata_for("abc", seed=123, n_patients=200, extra={"chunk_size": 50, "strategies": ["base"]})
    paths = write_run(tmp_path / "out" / "run1", simulate_chunks(model, 200, 123, chunk_size=50), metadata=meta)
    stored = json.loads(paths["metadata"].read_text(encoding="utf-8"))
    assert stored["scenario_sha256"] == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert stored["scenario"] == "abc"
    assert stored["tool_version"] == sim.__version__
    assert (stored["seed"], stored["patients"], stored["chunk_size"]) == (123, 200, 50)
    assert stored["strategies"] == ["base"]
    assert stored["numpy"] == np.__version__ and stored["pandas"] == pd.__version__
    assert stored["pyarrow"] == pa.__version__ and stored["python"].count(".") == 2
    when = datetime.fromisoformat(stored["date_utc"])
    assert when.utcoffset() == timedelta(0)
    assert abs(datetime.now(timezone.utc) - when) < timedelta(minutes=5)
    events = pd.read_parquet(paths["events"])
    assert stored["files"][0] == {"name": "events.parquet", "table": "events", "rows": len(events)}
    assert stored["files"][1]["rows"] == 200
    with pytest.raises(ExportError, match=r"keys \['seed'\] are set by metadata_for"):
        metadata_for("abc", 1, 10, extra={"seed": 2})
    with pytest.raises(ExportError, match="seed: expected a non-negative integer, got -1"):
        metadata_for("abc", -1, 10)


def test_write_run_adds_date_when_missing(tmp_path):
    model = illness_death()
    paths = write_run(tmp_path / "r", simulate_chunks(model, 30, 1, chunk_size=10), fmt="csv",
                      metadata={"note": "no date given", "seed": np.int64(1), "format": "csv"})
    stored = json.loads(paths["metadata"].read_text(encoding="utf-8"))
    assert stored["note"] == "no date given" and stored["seed"] == 1
    assert datetime.fromisoformat(stored["date_utc"]).utcoffset() == timedelta(0)


def _failing_chunks(model, n_good: int, error: BaseException):
    for i, chunk in enumerate(simulate_chunks(model, 400, 5, chunk_size=100)):
        if i == n_good:
            raise error
        yield chunk


@pytest.mark.parametrize("error", [RuntimeError("disk on fire"), KeyboardInterrupt()])
def test_write_run_failure_leaves_nothing(tmp_path, error):
    model = illness_death()
    out = tmp_path / "new" / "deeper" / "run"
    with pytest.raises(type(error)):
        write_run(out, _failing_chunks(model, 2, error), long_format_model=model, metadata={"seed": 5})
    assert list(tmp_path.iterdir()) == []  # no output, no temp folder, created parents removed again


def test_write_run_refuses_existing_before_any_work(tmp_path):
    out = tmp_path / "run1"
    out.mkdir()
    (out / "keep.txt").write_text("previous run")
    touched = []

    def chunks():
        touched.append(True)
        yield from simulate_chunks(illness_death(), 10, 1, chunk_size=10)

    with pytest.raises(ExportError, match=r"run1 exists; pass force=True \(--force\) to overwrite"):
        write_run(out, chunks(), metadata={})
    assert touched == []
    assert (out / "keep.txt").read_text() == "previous run"


def test_write_run_force_replaces_only_when_complete(tmp_path):
    model = illness_death()
    out = tmp_path / "run1"
    out.mkdir()
    (out / "keep.txt").write_text("previous run")
    with pytest.raises(RuntimeError, match="disk on fire"):
        write_run(out, _failing_chunks(model, 1, RuntimeError("disk on fire")), force=True, metadata={})
    assert [p.name for p in out.iterdir()] == ["keep.txt"]  # old output intact after a failed run
    assert [p.name for p in tmp_path.iterdir()] == ["run1"]
    write_run(out, simulate_chunks(model, 100, 5, chunk_size=50), force=True, metadata={})
    assert sorted(p.name for p in out.iterdir()) == ["events.parquet", "metadata.json", "patients.parquet"]
    assert [p.name for p in tmp_path.iterdir()] == ["run1"]  # the backup of the old run is gone


def test_write_run_rejects_inconsistent_chunks(tmp_path):
    model = illness_death()
    (e1, p1), (e2, p2) = simulate_chunks(model, 40, 3, chunk_size=20)
    e2 = e2.assign(transition=e2["transition"].cat.add_categories(["relapse"]))
    with pytest.raises(ExportError, match="column 'transition' has categories"):
        write_run(tmp_path / "run", [(e1, p1), (e2, p2)], metadata={})
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("chunks, metadata, message", [
    ([], {}, "no chunks were written"),
    (None, {"files": []}, r"metadata keys \['files'\] are reserved"),
    (None, {"bad": float("nan")}, "cannot be stored as JSON"),
    (None, {"format": "csv"}, r"metadata\['format'\] is 'csv' but the tables are written as 'parquet'"),
])
def test_write_run_bad_input(tmp_path, chunks, metadata, message):
    chunks = simulate_chunks(illness_death(), 10, 1) if chunks is None else chunks
    with pytest.raises(ExportError, match=message):
        write_run(tmp_path / "run", chunks, metadata=metadata)
    assert list(tmp_path.iterdir()) == []


def test_run_writer_context_manager(tmp_path):
    model = illness_death()
    with RunWriter(tmp_path / "run", fmt="csv", metadata={"seed": 2}) as writer:
        for events, patients in simulate_chunks(model, 50, 2, chunk_size=25):
            writer.write_chunk(events, patients)
        assert not (tmp_path / "run").exists()  # nothing visible until the writer closes
    assert writer.paths["patients"] == tmp_path / "run" / "patients.csv"
    assert len(pd.read_csv(writer.paths["patients"])) == 50
    with pytest.raises(ExportError, match="cannot write a chunk, the writer is closed"):
        writer.write_chunk(events, patients)


def test_streaming_memory_is_bounded(tmp_path):
    """Design budget: streaming 300k patients in chunks of 20k keeps the traced peak (numpy, pandas
    and Python allocations) below half the size of the whole in-memory tables, and the Arrow memory
    pool (not seen by tracemalloc) does not accumulate across chunks either."""
    model = illness_death()
    n, chunk = 300_000, 20_000
    sample_events, sample_patients = next(simulate_chunks(model, 2000, 11, chunk_size=2000))
    sample_lf = long_format(sample_events, sample_patients, model)
    row_bytes = {name: df.memory_usage(index=False, deep=True).sum() / len(df)
                 for name, df in (("events", sample_events), ("patients", sample_patients),
                                  ("long_format", sample_lf))}
    arrow_bytes: list[int] = []
    tracemalloc.start()
    try:
        paths = write_run(tmp_path / "big", simulate_chunks(model, n, 11, chunk_size=chunk),
                          metadata=metadata_for("memory test", 11, n), long_format_model=model,
                          progress=lambda done, total: arrow_bytes.append(pa.total_allocated_bytes()))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    files = json.loads(paths["metadata"].read_text(encoding="utf-8"))["files"]
    total = sum(f["rows"] * row_bytes[f["table"]] for f in files)
    assert files[1]["rows"] == n
    assert total > 50e6  # the whole tables are large compared with one chunk
    assert peak < 0.5 * total, (peak, total)
    assert len(arrow_bytes) == n // chunk and max(arrow_bytes) < 0.5 * total


def test_outputs_get_ordinary_permissions(tmp_path):
    """Temporary files and folders must not pass a private (0600/0700) mode on to the output."""
    umask = os.umask(0)
    os.umask(umask)
    path = write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.csv")
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask
    paths = write_run(tmp_path / "run", simulate_chunks(illness_death(), 10, 1), metadata={})
    assert stat.S_IMODE((tmp_path / "run").stat().st_mode) == 0o777 & ~umask
    assert stat.S_IMODE(paths["events"].stat().st_mode) == 0o666 & ~umask


def test_run_writer_add_table(tmp_path, small_run):
    model, run = small_run
    summary = pd.DataFrame({"strategy": ["treat"], "outcome": ["life_years"], "mean": [12.25]})
    per = per_patient_time_in_states(run.events, run.patients, model.state_names, strategy="treat")
    with RunWriter(tmp_path / "run", metadata={}) as writer:
        writer.write_chunk(run.events, run.patients)
        writer.add_table("summary", summary)
        writer.add_table("time_in_states", per)
        # caller mistakes are refused before anything is written, and the run stays open
        with pytest.raises(ExportError, match="'summary' is already used"):
            writer.add_table("summary", summary)
        with pytest.raises(ExportError, match=r"table name '\.\./x' is invalid"):
            writer.add_table("../x", summary)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert sorted(p.name for p in (tmp_path / "run").iterdir()) == [
        "events.parquet", "metadata.json", "patients.parquet", "summary.csv", "time_in_states.csv"]
    pd.testing.assert_frame_equal(pd.read_csv(writer.paths["summary"]), summary)
    back = pd.read_csv(writer.paths["time_in_states"], float_precision="round_trip")
    np.testing.assert_array_equal(back["patient"].to_numpy(), per.index.to_numpy())
    np.testing.assert_array_equal(back[list(model.state_names)].to_numpy(), per.to_numpy())
    files = json.loads(writer.paths["metadata"].read_text(encoding="utf-8"))["files"]
    assert files[2:] == [{"name": "summary.csv", "table": "summary", "rows": 1},
                         {"name": "time_in_states.csv", "table": "time_in_states", "rows": len(per)}]


def test_export_errors_carry_problems_as_data_and_keep_their_wording(tmp_path):
    with pytest.raises(ExportError) as info:
        metadata_for("x", -3, 10)
    err = info.value
    assert str(err) == "seed: expected a non-negative integer, got -3"  # the established message
    assert isinstance(err, ValidationError) and isinstance(err, ValueError)
    assert (err.problem.path, err.problem.value, err.problem.rule) == (("seed",), -3,
                                                                        "must be a non-negative integer")
    back = pickle.loads(pickle.dumps(err))  # process and Dask executors send errors between processes
    assert type(back) is ExportError and str(back) == str(err) and back.problems == err.problems

    path = tmp_path / "t.csv"
    path.write_text("old\n")
    with pytest.raises(ExportError) as info:
        write_table(pd.DataFrame({"a": [1]}), path)
    assert str(info.value) == f"{path} exists; pass force=True (--force) to overwrite"
    problem = info.value.problem
    assert (problem.file, problem.path, problem.value) == (str(path), (), NO_VALUE)
    assert problem.rule == "exists; pass force=True (--force) to overwrite"

    with pytest.raises(ExportError, match="format 'feather' is not supported") as info:
        write_table(pd.DataFrame({"a": [1]}), tmp_path / "u.csv", fmt="feather")
    assert (info.value.problem.path, info.value.problem.value) == (("fmt",), "feather")

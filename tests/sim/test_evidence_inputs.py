"""What the evidence window and ``hazardtrace fit`` ask of a data file before reading it (its columns,
its worksheets) and the reported total events per arm (``ARM=N``), one implementation for both.
Data invented."""

from __future__ import annotations

import io
from pathlib import Path

import pandas as pd
import pytest

from sim.cli.commands import main
from sim.evidence import SurvivalDataError, file_columns, file_sheets, parse_total_events

FRAME = pd.DataFrame({"arm": ["a", "b"], "months": [3.0, 5.0], "death": [1, 0]})  # invented


@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".pq", ".xlsx"])
def test_columns_of_each_format(tmp_path: Path, suffix: str) -> None:
    path = tmp_path / f"trial{suffix}"
    if suffix == ".csv":
        FRAME.to_csv(path, index=False)
    elif suffix == ".xlsx":
        FRAME.to_excel(path, index=False)
    else:
        FRAME.to_parquet(path)
    assert file_columns(path) == ["arm", "months", "death"]
    assert file_sheets(path) == (["Sheet1"] if suffix == ".xlsx" else [])


def test_worksheets_and_their_columns(tmp_path: Path) -> None:
    path = tmp_path / "trial.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as book:
        pd.DataFrame({"note": ["invented"]}).to_excel(book, sheet_name="about", index=False)
        FRAME.to_excel(book, sheet_name="patients", index=False)
    assert file_sheets(path) == ["about", "patients"]
    assert file_columns(path) == ["note"]  # the first sheet by default
    assert file_columns(path, "patients") == file_columns(path, 1) == ["arm", "months", "death"]
    with pytest.raises(SurvivalDataError) as err:
        file_columns(path, "nowhere")
    assert err.value.problems[0].file == str(path) and "nowhere" in err.value.problems[0].rule


def test_unreadable_files_are_named(tmp_path: Path) -> None:
    for path, rule in ((tmp_path / "missing.csv", "must be an existing file"),
                       (tmp_path / "notes.txt", "must be a .csv, .parquet or .xlsx file")):
        if path.suffix == ".txt":
            path.write_text("invented")
        with pytest.raises(SurvivalDataError) as err:
            file_columns(path)
        assert err.value.problems[0].file == str(path) and err.value.problems[0].rule == rule
    broken = tmp_path / "broken.xlsx"
    broken.write_text("not a workbook")
    for ask in (file_columns, file_sheets):
        with pytest.raises(SurvivalDataError) as err:
            ask(broken)
        assert err.value.problems[0].file == str(broken) and err.value.problems[0].rule.startswith("cannot be read")


@pytest.mark.parametrize("given, expected", [
    ("control=120, treated=95", {"control": 120, "treated": 95}),
    (["control=120", "treated=95"], {"control": 120, "treated": 95}),
    ("60", {"all": 60}),
    (["60"], {"all": 60}),
    ("", {}),
    ([], {}),
    (" arm one = 7 ,", {"arm one": 7}),
])
def test_total_events_parsed(given, expected) -> None:
    assert parse_total_events(given) == expected


@pytest.mark.parametrize("given, value", [("control=-1", "control=-1"), ("control=1.5", "control=1.5"),
                                          ("control", "control"), (["a=1", "a=2"], "a=2"), (["x="], "x=")])
def test_bad_total_events_name_the_item(given, value) -> None:
    with pytest.raises(SurvivalDataError) as err:
        parse_total_events(given, ("--total-events",))
    problem = err.value.problems[0]
    assert problem.path == ("--total-events",) and problem.value == value


def test_cli_bad_total_events_exit_2(tmp_path: Path, capsys) -> None:
    (tmp_path / "km.csv").write_text("time,survival\n0,1\n4,0.75\n8,0.5\n")
    (tmp_path / "risk.csv").write_text("time,at_risk\n0,40\n4,30\n8,20\n")
    code = main(["fit", "--curves", str(tmp_path / "km.csv"), "--at-risk", str(tmp_path / "risk.csv"),
                 "--total-events", "control=many"], out=io.StringIO())
    err = capsys.readouterr().err
    assert code == 2 and "--total-events" in err and "control=many" in err

"""Patient-level survival data in (CSV, Parquet, .xlsx) with errors naming file, row, column, value and
rule; the 'hazardtrace fit' command line (exit codes, the table, the fragment written atomically); where a
fitted hazard falls below background mortality (closed form for an exponential against a Gompertz law).
All data here are invented or simulated."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sim.cli.commands import main
from sim.evidence import SurvivalData, SurvivalDataError, below_background, read_survival_data
from sim.hazards import Exponential, Gompertz, Weibull
from sim.model import BackgroundMortality

tomllib = pytest.importorskip("tomllib")


def _frame(n=60, seed=4) -> pd.DataFrame:
    """Invented trial: two arms, Weibull times (months), uniform censoring and delayed entry."""
    rng = np.random.default_rng(seed)
    arm = np.repeat(["control", "active"], n // 2)
    t = np.where(arm == "control", Weibull(shape=1.2, scale=20.0).rvs(n, rng), Weibull(shape=1.2, scale=30.0).rvs(n, rng))
    c = rng.uniform(5.0, 40.0, n)
    return pd.DataFrame({"months": np.minimum(t, c).round(3), "death": (t <= c).astype(int), "arm": arm})


@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".xlsx"])
def test_reads_each_format(tmp_path, suffix):
    df = _frame()
    path = tmp_path / f"trial{suffix}"
    {".csv": lambda: df.to_csv(path, index=False), ".parquet": lambda: df.to_parquet(path),
     ".xlsx": lambda: df.to_excel(path, index=False)}[suffix]()
    data = read_survival_data(path, time="months", event="death", group="arm", unit="months")
    np.testing.assert_allclose(data.time, df["months"])
    assert data.n_events == df["death"].sum() and data.groups == ("active", "control") and data.unit == "months"
    assert not data.delayed


def _problems(path, **kw):
    with pytest.raises(SurvivalDataError) as err:
        read_survival_data(path, **kw)
    return err.value.problems


def test_row_errors_name_file_line_column_value_rule(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("time,event,entry\n5,1,0\n-2,0,0\n4,2,0\n3,1,\n6,1,7\nx,1,0\n")
    found = {(p.line, p.path[0]): p for p in _problems(path, entry="entry")}
    assert found[(3, "time")].value == -2 and ">= 0" in found[(3, "time")].rule
    assert found[(4, "event")].value == 2 and "0 (censored) or 1" in found[(4, "event")].rule
    assert "missing" in found[(5, "entry")].rule
    assert found[(6, "entry")].value == 7 and "before the exit" in found[(6, "entry")].rule
    assert found[(7, "time")].value == "x" and "number" in found[(7, "time")].rule
    assert all(p.file == str(path) for p in found.values())
    assert f"{path}:3: time: must be >= 0" in str(SurvivalDataError.of(list(found.values())))


def test_missing_column_no_events_unit_and_file_type(tmp_path):
    path = tmp_path / "d.csv"
    path.write_text("time,event\n5,0\n6,0\n")
    (p,) = _problems(path, time="months")
    assert p.path == ("months",) and "columns: time, event" in p.rule
    (p,) = _problems(path)
    assert p.path == ("event",) and "at least one event" in p.rule and p.file == str(path)
    (p,) = _problems(path, unit="fortnights")
    assert p.path == ("unit",) and p.value == "fortnights"
    other = tmp_path / "d.json"
    other.write_text("{}")
    (p,) = _problems(other)
    assert p.file == str(other) and ".csv" in p.rule
    with pytest.raises(SurvivalDataError) as err:
        SurvivalData.from_arrays([1.0, 2.0, 3.0], [1, 0, 1], group=["a", "b", "a"])
    assert "arm 'b' has no events" in str(err.value)


# ---- command line -------------------------------------------------------------------------------------

def _run(argv):
    out, code = io.StringIO(), None
    code = main(argv, out=out)
    return code, out.getvalue()


def test_cli_fit_prints_table_and_writes_fragment(tmp_path, capsys):
    path = tmp_path / "trial.csv"
    _frame(200).to_csv(path, index=False)
    frag = tmp_path / "fits.toml"
    code, text = _run(["fit", str(path), "--time", "months", "--event", "death", "--group", "arm", "--unit",
                       "months", "--families", "exponential", "weibull", "lognormal", "--breaks", "0", "12",
                       "--output", str(frag)])
    assert code == 0, capsys.readouterr().err
    assert "AIC" in text and "weibull" in text and "HR" in text and "AF" in text
    doc = tomllib.loads(frag.read_text())
    assert doc["chosen"]["unit"] == "months" and doc["chosen"]["family"] in ("exponential", "weibull", "lognormal",
                                                                              "piecewise")
    assert doc["fits"]["piecewise"]["breaks"] == [0.0, 12.0]
    assert doc["fits"]["weibull"]["statistics"]["reference_arm"] == "active"
    # an existing fragment is not replaced without --force: exit 2, file unchanged, no temporary file left
    before = frag.read_text()
    code, _ = _run(["fit", str(path), "--time", "months", "--event", "death", "--families", "exponential",
                    "--output", str(frag)])
    assert code == 2 and frag.read_text() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fits.toml", "trial.csv"]


def test_cli_fit_bad_input_exit_2_one_line(tmp_path, capsys):
    path = tmp_path / "trial.csv"
    path.write_text("time,event\n5,1\n4,3\n")
    code, _ = _run(["fit", str(path), "--families", "exponential"])
    err = capsys.readouterr().err
    assert code == 2 and f"{path}:3: event: must be 0 (censored) or 1 (event), got 3" in err
    code, _ = _run(["fit", str(path), "--curves", str(path)])
    assert code == 2 and "--at-risk" in capsys.readouterr().err


def test_cli_fit_from_curves(tmp_path, capsys):
    (tmp_path / "km.csv").write_text("time,survival\n0,1\n2,0.9\n4,0.75\n6,0.62\n8,0.5\n10,0.41\n12,0.35\n")
    (tmp_path / "risk.csv").write_text("time,at_risk\n0,120\n4,85\n8,55\n12,30\n")
    patients = tmp_path / "patients.csv"
    code, text = _run(["fit", "--curves", str(tmp_path / "km.csv"), "--at-risk", str(tmp_path / "risk.csv"),
                       "--unit", "months", "--families", "exponential", "weibull", "--total-events", "60",
                       "--write-patients", str(patients)])
    assert code == 0, capsys.readouterr().err
    assert "Reconstructed 120 patients" in text and "weibull" in text
    written = pd.read_csv(patients)
    assert list(written.columns) == ["time", "event"] and len(written) == 120
    assert f"{written['event'].sum()} events" in text


def test_cli_fit_reads_a_named_worksheet(tmp_path, capsys):
    path = tmp_path / "trial.xlsx"
    with pd.ExcelWriter(path) as xl:
        pd.DataFrame({"note": ["invented"]}).to_excel(xl, sheet_name="about", index=False)
        _frame().to_excel(xl, sheet_name="patients", index=False)
    code, text = _run(["fit", str(path), "--sheet", "patients", "--time", "months", "--event", "death",
                       "--families", "exponential"])
    assert code == 0, capsys.readouterr().err
    assert "60 patients" in text


# ---- background mortality -------------------------------------------------------------------------------

def test_below_background_closed_form():
    """Fitted exponential r per month (12 r per year) against a Gompertz background b e^{g a} at attained
    age a = a0 + t: below from t* = ln(12 r / b) / g - a0 (solving 12 r = b e^{g (a0 + t)})."""
    fitted = Exponential(rate=0.004)  # per month
    bg = Gompertz(rate=3e-5, shape=0.09)
    (res,) = below_background(fitted, bg, entry_age=60.0, horizon=40.0, unit="months")
    t_star = math.log(12 * 0.004 / 3e-5) / 0.09 - 60.0
    assert len(res.intervals) == 1
    assert res.intervals[0][0] == pytest.approx(t_star, abs=1e-8) and res.intervals[0][1] == 40.0
    assert "below the background" in res.describe()


def test_below_background_per_sex_and_never():
    bg = BackgroundMortality("dead", {"female": Gompertz(rate=3e-5, shape=0.09), "male": Gompertz(rate=6e-5, shape=0.09)})
    res = {r.label: r for r in below_background(Exponential(rate=0.05), bg, entry_age=50.0, horizon=40.0)}
    for sex, b in (("female", 3e-5), ("male", 6e-5)):
        assert res[sex].first == pytest.approx(math.log(0.05 / b) / 0.09 - 50.0, abs=1e-8)
    (never,) = below_background(Exponential(rate=1.0), Gompertz(rate=3e-5, shape=0.09), entry_age=50.0, horizon=30.0)
    assert never.intervals == () and never.first is None


def test_below_background_uses_the_background_multiplier():
    # A standardised mortality ratio m scales the Gompertz rate: the crossing moves to
    # ln(r / (m b)) / g - a0 (same closed form as above, with m b in place of b).
    m = 2.5
    bg = BackgroundMortality("dead", {"all": Gompertz(rate=3e-5, shape=0.09)}, multiplier=m)
    (res,) = below_background(Exponential(rate=0.05), bg, entry_age=50.0, horizon=40.0)
    assert res.first == pytest.approx(math.log(0.05 / (m * 3e-5)) / 0.09 - 50.0, abs=1e-8)


def test_cli_fit_shows_where_fits_fall_below_background(tmp_path, capsys):
    """Exponential data (invented: rate 0.02 a year) against the lanthic demo's Gompertz background
    (female 3e-5 e^{0.085 a}, male 5e-5 e^{0.085 a}): below from t* = ln(r / b) / 0.085 - 60 with r the
    fitted rate d / T (closed forms)."""
    rng = np.random.default_rng(12)
    t = Exponential(rate=0.02).rvs(400, rng)
    c = rng.uniform(1.0, 30.0, 400)
    df = pd.DataFrame({"time": np.minimum(t, c), "event": (t <= c).astype(int)})
    df.to_csv(tmp_path / "d.csv", index=False)
    scenario = Path(__file__).resolve().parents[2] / "scenarios" / "lanthic_syndrome.toml"
    code, text = _run(["fit", str(tmp_path / "d.csv"), "--families", "exponential", "--background", str(scenario),
                       "--entry-age", "60"])
    assert code == 0, capsys.readouterr().err
    rate = df["event"].sum() / df["time"].sum()
    for sex, b in (("female", 3e-5), ("male", 5e-5)):
        line = next(ln for ln in text.splitlines() if ln.strip().startswith(f"exponential: {sex}"))
        assert f"at years {math.log(rate / b) / 0.085 - 60.0:.3g}-40 since entry" in line, line
    code, _ = _run(["fit", str(tmp_path / "d.csv"), "--families", "exponential", "--background", str(scenario)])
    assert code == 2 and "--entry-age" in capsys.readouterr().err

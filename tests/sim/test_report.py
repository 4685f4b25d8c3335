"""The report (issue 17): one self-contained HTML file that a real browser opens without console
errors, well-formed, whose outcome table equals the run's summary table at the shown precision; its
PDF; the model diagram; the notebook summary; the command line."""

from __future__ import annotations

import io
import math
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sim.cli.commands import CAUTION as CLI_CAUTION
from sim.cli.commands import main
from sim.io import demo_model, demo_path, demo_scenario
from sim.pipeline import run_scenario
from sim.reference import discretization_study
from sim.report import (CAUTION, inputs_from_study, load_run_folder, model_svg, report_html, uncertainty_section)

XHTML = "{http://www.w3.org/1999/xhtml}"
PATIENTS = "2000"


def _cli(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue()


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory) -> Path:
    """The demo scenario run by the command line (sized down), with its HTML and PDF reports."""
    folder = tmp_path_factory.mktemp("report") / "lanthic"
    code, text = _cli(["run", str(demo_path()), "--patients", PATIENTS, "--output", str(folder)])
    assert code == 0, text
    for name in ("report.html", "report.pdf"):
        code, text = _cli(["report", str(folder), "--output", str(folder / name)])
        assert code == 0 and f"{folder / name}" in text, text
    return folder


def _tree(path: Path) -> ET.Element:
    """The report parsed by an XML parser: fails on anything that is not well-formed."""
    return ET.fromstring(path.read_text(encoding="utf-8").split("\n", 1)[1])  # after <!DOCTYPE html>


def _table_rows(root: ET.Element, cls: str) -> tuple[list[str], list[list[str]]]:
    table = next(t for t in root.iter(f"{XHTML}table") if t.get("class") == cls)
    head = ["".join(th.itertext()) for th in table.find(f"{XHTML}thead").iter(f"{XHTML}th")]
    rows = [["".join(td.itertext()) for td in tr.iter(f"{XHTML}td")] for tr in table.find(f"{XHTML}tbody")]
    return head, rows


def test_html_is_well_formed_and_self_contained(demo_run):
    path = demo_run / "report.html"
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    root = _tree(path)
    assert root.tag == f"{XHTML}html"
    # nothing to fetch: no script, no stylesheet or image links, no URL but XML namespace names
    assert not [e for e in root.iter() if e.tag.split("}")[-1] in ("script", "link", "img", "iframe", "object")]
    urls = set(re.findall(r"https?://[^\s\"'<>)]+", text))
    assert urls <= {"http://www.w3.org/1999/xhtml", "http://www.w3.org/2000/svg", "http://www.w3.org/1999/xlink"}, urls
    # inline SVG: the diagram and one curve figure per strategy
    svgs = list(root.iter("{http://www.w3.org/2000/svg}svg"))
    assert len(svgs) == 1 + len(demo_model().strategies)
    # ids unique across the inline figures (matplotlib's own ids are prefixed per figure)
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert len(ids) == len(set(ids))
    words = " ".join(root.itertext())
    assert CAUTION in words and CAUTION == CLI_CAUTION  # one caution text for the CLI and the report
    for section in ("The scenario in words", "Outcomes", "Survival and state occupancy",
                    "Discretization error of cycle-based approximations", "Conversions", "Run"):
        assert section in words


def test_outcome_table_equals_the_runs_summary_at_the_shown_precision(demo_run):
    summary = pd.read_csv(demo_run / "summary.csv")
    head, rows = _table_rows(_tree(demo_run / "report.html"), "outcomes")
    assert head == ["strategy", "outcome", "unit", "mean", "mcse", "exact", "z", "n"]
    assert len(rows) == len(summary)
    for row, (_, want) in zip(rows, summary.iterrows()):
        cell = dict(zip(head, row))
        assert (cell["strategy"], cell["outcome"]) == (want["strategy"], want["outcome"])
        # the MCSE to two significant digits, the mean and exact value to the same decimal place
        # (common practice, no source); thousands separated by commas
        d = max(0, 1 - math.floor(math.log10(want["mcse"])))
        for col in ("mean", "mcse", "exact"):
            assert cell[col] == f"{want[col]:,.{d}f}", (col, cell, want)
        assert cell["z"] == f"{want['z']:.2f}" and cell["n"] == f"{int(want['n']):,}"
        shown_mcse = float(cell["mcse"].replace(",", ""))
        assert 10 <= shown_mcse * 10 ** d and (d == 0 or shown_mcse * 10 ** d < 100)  # two significant digits
        # (or whole units, for an MCSE of 100 or more)
        unit = {"costs": "EUR", "qalys": "QALYs"}.get(want["outcome"].split("_")[0], "years")
        assert cell["unit"] == unit


def test_increment_table_equals_the_runs_increments(demo_run):
    inc = pd.read_csv(demo_run / "increments.csv")
    head, rows = _table_rows(_tree(demo_run / "report.html"), "increments")
    assert len(rows) == len(inc)
    for row, (_, want) in zip(rows, inc.iterrows()):
        cell = dict(zip(head, row))
        d = max(0, 1 - math.floor(math.log10(want["mcse"])))
        assert cell["value"] == f"{want['value']:,.{d}f}" and cell["mcse"] == f"{want['mcse']:,.{d}f}"


def _chromium() -> str:
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip("headless Chromium is not installed (scripts/setup.sh installs Debian's 'chromium' package)")
    return exe


def _open_in_chromium(page: Path, shot: Path) -> str:
    """Open ``page`` in headless Chromium, save a screenshot, return its log (console messages are
    logged as ``INFO:CONSOLE:<line>]`` entries (``CONSOLE(<line>)`` in older versions) with ``--enable-logging=stderr``)."""
    proc = subprocess.run([_chromium(), "--headless", "--disable-gpu", "--no-sandbox", "--hide-scrollbars",
                           "--no-first-run", "--disable-extensions", f"--user-data-dir={shot.parent / 'profile'}",
                           "--window-size=1200,2400", f"--screenshot={shot}", "--enable-logging=stderr", "--v=0",
                           page.resolve().as_uri()], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stderr


def _console_errors(log: str) -> list[str]:
    return [line for line in log.splitlines() if re.search(r":CONSOLE[(:]", line) or "Uncaught" in line
            or "Failed to load resource" in line]


def test_html_opens_in_a_real_browser_without_console_errors(demo_run, tmp_path):
    # the detector finds a console error and a failed load where there is one (positive control)
    bad = tmp_path / "bad.html"
    bad.write_text("<!DOCTYPE html><html><body><p>x</p><img src='missing.png'/>"
                   "<script>console.error('broken on purpose')</script></body></html>", encoding="utf-8")
    assert _console_errors(_open_in_chromium(bad, tmp_path / "bad.png"))
    shot = tmp_path / "report.png"
    log = _open_in_chromium(demo_run / "report.html", shot)
    assert not _console_errors(log), _console_errors(log)
    from PIL import Image  # pillow, a dependency of matplotlib

    image = np.asarray(Image.open(shot).convert("RGB"), dtype=np.int16)
    assert image.shape[:2] == (2400, 1200)
    ink = (image.sum(axis=2) < 600).mean()  # share of pixels that are not (near) white
    assert 0.01 < ink < 0.6, ink
    colours = len(np.unique(image.reshape(-1, 3), axis=0))
    assert colours > 50  # text, tables, coloured curves and bands, not one flat colour


def _pdf_pages(path: Path) -> list[str]:
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext is not installed (scripts/setup.sh installs Debian's 'poppler-utils')")
    text = subprocess.run(["pdftotext", "-layout", str(path), "-"], capture_output=True, text=True, check=True).stdout
    return text.split("\f")[:-1] if text.endswith("\f") else text.split("\f")


def test_pdf_pages_and_text(demo_run):
    pages = _pdf_pages(demo_run / "report.pdf")
    assert 3 <= len(pages) <= 8, len(pages)
    summary = pd.read_csv(demo_run / "summary.csv")
    text = "\n".join(pages)
    for _, r in summary.iterrows():
        d = max(0, 1 - math.floor(math.log10(r["mcse"])))
        assert f"{r['mean']:,.{d}f}" in text and f"{r['exact']:,.{d}f}" in text
    assert "not for clinical decisions about individual patients" in " ".join(text.split())
    # the outcome table is not cut by a page break: its header and last row are on one page
    last = summary.iloc[-1]
    d = max(0, 1 - math.floor(math.log10(last["mcse"])))
    on = [i for i, p in enumerate(pages) if "life_years_discounted" in p and f"{last['mean']:,.{d}f}" in p]
    assert on, "the outcome table's first and last rows are on different pages"


def test_report_of_a_scenario_runs_it_in_memory_first(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, text = _cli(["report", str(demo_path("risk-vs-rate")), "--patients", "500"])
    assert code == 0, text
    assert "in memory at its settings (500 patients per strategy" in text
    out = tmp_path / f"{demo_path('risk-vs-rate').stem}_report.html"
    root = _tree(out)
    assert "Outcomes" in " ".join(root.itertext())
    assert sorted(p.name for p in tmp_path.iterdir()) == [out.name]  # nothing else written
    code, _ = _cli(["report", str(demo_path("risk-vs-rate")), "--patients", "500"])
    assert code == 2  # exists: --force to replace
    code, _ = _cli(["report", str(demo_path("risk-vs-rate")), "--output", "x.docx"])
    assert code == 2


def test_comparison_report_and_uncertainty_hook():
    scenario = demo_scenario("risk-vs-rate")
    study = discretization_study(scenario.model, cycle_lengths=[0.5, 1.0])
    html = report_html(inputs_from_study(scenario, study))
    root = ET.fromstring(html.split("\n", 1)[1])
    words = " ".join(root.itertext())
    assert "Discretization error of cycle-based approximations" in words and "Outcomes" not in words
    assert uncertainty_section(None) == ""
    table = pd.DataFrame({"strategy": ["a", "b"], "probability cost-effective": [0.25, 0.75]})
    part = uncertainty_section({"Acceptability at 30,000 EUR/QALY": table})
    assert "0.25000" in part and "Acceptability" in part


def test_model_diagram_names_every_state_and_transition():
    for name in ("lanthic", "ferrovian", "risk-vs-rate"):
        model = demo_model(name)
        svg = ET.fromstring(model_svg(model))
        texts = [("".join(t.itertext())) for t in svg.iter("{http://www.w3.org/2000/svg}text")]
        for s in model.states:
            assert s.name in texts
        for t in model.transitions:
            assert any(x.startswith(f"{t.name} (") for x in texts)
        arrows = [p for p in svg.iter("{http://www.w3.org/2000/svg}path") if p.get("marker-end")]
        living = sum(not s.absorbing for s in model.states)
        assert len(arrows) == len(model.transitions) + (living if model.background is not None else 0)


def test_notebook_summary_shows_the_key_outcomes():
    results = run_scenario(demo_scenario(), patients=400, study=False)
    html = results._repr_html_()
    root = ET.fromstring(html)  # well-formed
    text = " ".join(root.itertext())
    out = results.outcomes.set_index(["strategy", "outcome"])
    for strategy in results.scenario.model.strategy_names:
        r = out.loc[(strategy, "life_years")]
        d = max(0, 1 - math.floor(math.log10(r["mcse"])))
        assert f"{r['mean']:,.{d}f} ({r['mcse']:,.{d}f}); exact {r['exact']:,.{d}f}" in text
    assert "Net monetary benefit of new therapy vs usual care" in text


def test_report_from_the_folder_re_estimates_the_curves_as_the_run_does(demo_run):
    """The curves of a streamed run folder come from its recorded event log: the same as a run that
    keeps the log in memory (same seed and size)."""
    inputs = load_run_folder(demo_run)
    kept = run_scenario(demo_scenario(), patients=int(PATIENTS), study=False)
    pd.testing.assert_frame_equal(inputs.survival.reset_index(drop=True), kept.survival.reset_index(drop=True),
                                  check_categorical=False, check_dtype=False)
    pd.testing.assert_frame_equal(inputs.occupancy.reset_index(drop=True), kept.occupancy.reset_index(drop=True),
                                  check_categorical=False, check_dtype=False)

"""The report of a probabilistic analysis (issue 17 item 1 "the uncertainty results where present",
issue 14 item 3): ``hazardtrace report PSA_DIR`` on a small ``hazardtrace psa`` run of the Quorrel demo
gives a well-formed, self-contained HTML report whose incremental, acceptability, EVPI and noise
tables equal the analysis's own tables at the shown precision, and a PDF whose text holds them."""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from sim.io import load_scenario
from sim.report import method_words

from .test_report import XHTML, _cli, _console_errors, _open_in_chromium, _pdf_pages, _table_rows, _tree

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "scenarios" / "quorrel_psa.toml"
DRAWS, PATIENTS = 40, 200
POPULATION, YEARS = 5000, 10
GROUP = "valuation.utilities.well, valuation.utilities.mild"
SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def psa_run(tmp_path_factory) -> Path:
    """A small analysis of the demo written by the command line, with its HTML and PDF reports."""
    folder = tmp_path_factory.mktemp("report_psa") / "quorrel-psa"
    code, text = _cli(["psa", str(SCENARIO), "--draws", str(DRAWS), "--patients", str(PATIENTS), "--workers", "1",
                       "--output", str(folder)])
    assert code == 0, text
    for name in ("report.html", "report.pdf"):
        code, text = _cli(["report", str(folder), "--output", str(folder / name), "--population", str(POPULATION),
                           "--years", str(YEARS), "--evppi", GROUP])
        assert code == 0 and f"{folder / name}" in text, text
    return folder


def _decimals(mcse: float) -> int:
    """Two significant digits of the MCSE, the estimate to the same place (common practice, no source)."""
    return int(min(8, max(0, 1 - math.floor(math.log10(mcse)))))


def _shown(value: float, mcse: float) -> str:
    return f"{value:,.{_decimals(mcse)}f}"


def _check(cell: str, value: float, mcse: float) -> None:
    """A shown estimate: to its MCSE's precision; where the MCSE is 0 the value itself (exactly 0 here:
    no draw changes the decision)."""
    if mcse > 0:
        assert cell == _shown(value, mcse), (cell, value, mcse)
    else:
        assert float(cell.replace(",", "")) == value == 0.0, (cell, value)


def _rows(root, cls: str) -> list[dict[str, str]]:
    head, rows = _table_rows(root, cls)
    return [dict(zip(head, r)) for r in rows]


def test_html_is_well_formed_self_contained_with_every_part(psa_run):
    path = psa_run / "report.html"
    text = path.read_text(encoding="utf-8")
    root = _tree(path)  # an XML parser reads it: well-formed
    assert not [e for e in root.iter() if e.tag.split("}")[-1] in ("script", "link", "img", "iframe", "object")]
    urls = set(re.findall(r"https?://[^\s\"'<>)]+", text))
    assert urls <= {"http://www.w3.org/1999/xhtml", "http://www.w3.org/2000/svg", "http://www.w3.org/1999/xlink"}
    # the model diagram and four plots (plane, acceptability, EVPI, convergence), ids unique across them
    assert len(list(root.iter(f"{SVG}svg"))) == 5
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert len(ids) == len(set(ids))
    words = " ".join(" ".join(root.itertext()).split())
    for part in ("Uncertainty", "Uncertain inputs", "Incremental results", "Cost-effectiveness plane", "Acceptability",
                 "Expected value of perfect information", "Expected value of partial perfect information",
                 "Patient-level noise", "Convergence over draws",
                 f"{DRAWS} parameter draws of 17 uncertain parameters"):
        assert part in words, part
    # the scenario in words lists the uncertain inputs (sim.psa.describe_uncertainty)
    scenario = next(s for s in root.iter(f"{XHTML}section") if s.get("id") == "scenario")
    said = " ".join(" ".join(scenario.itertext()).split())
    assert "Uncertain inputs (17 parameters; draws reproducible from seed 14)" in said
    assert "valuation.utilities.severe: beta(alpha=44.1, beta=53.9) (method of moments from mean 0.45, se 0.05)" in said
    # each method's colour is the one of the survival curves and the window (Okabe-Ito)
    for colour in ("#0072B2", "#D55E00", "#009E73", "#E69F00", "#CC79A7"):
        assert colour.lower() in text.lower(), colour


def test_inputs_table_states_each_distribution_with_scipys_interval(psa_run):
    rows = {r["parameter"]: r for r in _rows(_tree(psa_run / "report.html"), "psa-inputs")}
    assert len(rows) == 17
    r = rows["transitions[0].rate"]  # gamma, mean 0.08 and SE 0.012 by the method of moments
    shape, scale = (0.08 / 0.012) ** 2, 0.012 ** 2 / 0.08  # Briggs, Claxton & Sculpher 2006, ch. 4
    assert r["distribution"] == f"gamma(shape={shape:.6g}, scale={scale:.6g})"
    assert r["how fitted"] == "method of moments from mean 0.08, se 0.012"
    lo, hi = (float(x.replace(",", "")) for x in r["95% interval"].split(" to "))
    want = scipy.stats.gamma(shape, scale=scale).ppf([0.025, 0.975])
    np.testing.assert_allclose([lo, hi], want, rtol=5e-4)  # four significant figures shown
    r = rows["valuation.state_costs.well"]  # uniform(50, 150): interval 52.5 to 147.5 (scipy.stats.uniform)
    assert r["95% interval"] == "52.50 to 147.5" and r["how fitted"] == "parameters given"
    assert rows["transitions[2].rate"]["deterministic value"].endswith("(the mean: not in the file)")


def test_incremental_table_equals_the_analysis_at_the_shown_precision(psa_run):
    want = pd.read_csv(psa_run / "incremental.csv")
    rows = _rows(_tree(psa_run / "report.html"), "psa-incremental")
    assert len(rows) == len(want) == 5  # simulated, exact and three cycle-based approximations
    for row, (_, w) in zip(rows, want.iterrows()):
        assert (row["method"], row["strategy"], row["quadrant"]) == (method_words(w["method"]), w["strategy"],
                                                                     w["quadrant"])
        for col, sd, name in (("delta_costs", "sd_delta_costs", "Δ costs (EUR)"),
                              ("delta_effects", "sd_delta_effects", "Δ QALYs")):
            mcse = w[sd] / math.sqrt(DRAWS)  # MCSE of a mean of independent draws
            assert row[name] == _shown(w[col], mcse)
            assert row[f"{name} MCSE"] == _shown(mcse, mcse)
            assert row[f"{name} SD"] == _shown(w[sd], mcse)
        assert row["ICER (EUR/QALY)"] == f"{w['icer']:,.0f}"


def test_evpi_tables_equal_the_analysis_at_the_shown_precision(psa_run):
    root = _tree(psa_run / "report.html")
    evpi = pd.read_csv(psa_run / "evpi.csv")
    exact = evpi[evpi["method"] == "exact"].set_index("wtp")
    rows = _rows(root, "psa-evpi")
    assert 10 <= len(rows) <= 13 and "30,000" in [r["willingness to pay (EUR/QALY)"] for r in rows]
    # discounted patients over the decision's years, first year undiscounted, at the cost discount rate
    # (annuity due: common practice, no source)
    r = load_scenario(SCENARIO).model.valuation.discount_costs
    factor = POPULATION * sum((1 + r) ** -t for t in range(YEARS))
    for row in rows:
        w = exact.loc[float(row["willingness to pay (EUR/QALY)"].replace(",", ""))]
        _check(row["EVPI per patient (EUR)"], w["evpi"], w["mcse"])
        _check(row["MCSE"], w["mcse"], w["mcse"])
        assert row["optimal strategy now"] == w["optimal_strategy"]
        _check(row["population EVPI (EUR)"], factor * w["evpi"], factor * w["mcse"])
    by_method = pd.read_csv(psa_run / "evpi_by_method.csv")
    at = by_method[by_method["wtp"] == 30000.0]
    rows = _rows(root, "psa-evpi-methods")
    assert len(rows) == len(at) == 5
    for row, (_, w) in zip(rows, at.iterrows()):
        assert row["method"] == method_words(w["method"])
        _check(row["EVPI per patient (EUR)"], w["evpi"], w["mcse"])
        _check(row["difference from reference"], w["difference"], w["difference_mcse"])
    # EVPPI: >= 0 and <= the EVPI of the same draws (issue 14; Strong, Oakley & Brennan 2014)
    for row in _rows(root, "psa-evppi"):
        assert row["parameters"] == GROUP
        evppi = float(row["EVPPI per patient (EUR)"].replace(",", ""))
        assert 0 <= evppi <= float(row["EVPI (EUR)"].replace(",", "")) + 0.5


def test_acceptability_and_noise_tables_equal_the_analysis(psa_run):
    root = _tree(psa_run / "report.html")
    ceac = pd.read_csv(psa_run / "ceac.csv")
    at = ceac[ceac["wtp"] == 30000.0]
    rows = _rows(root, "psa-ceac")
    assert len(rows) == len(at)
    frontier = pd.read_csv(psa_run / "acceptability_frontier.csv")
    best = frontier[frontier["wtp"] == 30000.0].set_index("method")["strategy"]
    for row, (_, w) in zip(rows, at.iterrows()):
        assert (row["method"], row["strategy"]) == (method_words(w["method"]), w["strategy"])
        # binomial MCSE over the draws: sqrt(p (1 - p) / N)
        assert w["mcse"] == pytest.approx(math.sqrt(w["probability"] * (1 - w["probability"]) / DRAWS), rel=1e-12)
        _check(row["probability cost-effective"], w["probability"], w["mcse"])
        assert (row["highest expected net benefit"] == "yes") == (best[w["method"]] == w["strategy"])
    noise = pd.read_csv(psa_run / "noise_share.csv")
    rows = _rows(root, "psa-noise")
    assert len(rows) == len(noise) == 4
    for row, (_, w) in zip(rows, noise.iterrows()):
        assert (row["strategy"], row["outcome"]) == (w["strategy"], w["outcome"])
        se = w["noise_share"] * math.hypot(w["total_variance_se"] / w["total_variance"],
                                           w["noise_variance_se"] / w["noise_variance"])
        assert row["noise share"] == _shown(w["noise_share"], se)
        assert row["patients per draw for the target"] == f"{math.ceil(w['patients_for_target']):,}"
        assert row["patients per draw"] == f"{PATIENTS:,}"


def test_pdf_holds_the_evpi_and_incremental_numbers(psa_run):
    pages = _pdf_pages(psa_run / "report.pdf")
    assert 6 <= len(pages) <= 16, len(pages)
    text = "\n".join(pages)
    inc = pd.read_csv(psa_run / "incremental.csv")
    for _, w in inc.iterrows():
        for col, sd in (("delta_costs", "sd_delta_costs"), ("delta_effects", "sd_delta_effects")):
            assert _shown(w[col], w[sd] / math.sqrt(DRAWS)) in text
        assert f"{w['icer']:,.0f}" in text
    evpi = pd.read_csv(psa_run / "evpi.csv")
    for _, w in evpi[(evpi["method"] == "exact") & (evpi["mcse"] > 0)].iterrows():
        if w["wtp"] in (18000.0, 30000.0, 45000.0, 90000.0):
            assert _shown(w["evpi"], w["mcse"]) in text
    assert "not for clinical decisions about individual patients" in " ".join(text.split())


def test_psa_report_opens_in_a_real_browser_without_console_errors(psa_run, tmp_path):
    shot = tmp_path / "psa.png"
    log = _open_in_chromium(psa_run / "report.html", shot)
    assert not _console_errors(log), _console_errors(log)
    from PIL import Image  # pillow, a dependency of matplotlib

    image = np.asarray(Image.open(shot).convert("RGB"), dtype=np.int16)
    ink = (image.sum(axis=2) < 600).mean()
    assert 0.01 < ink < 0.6, ink


def test_psa_options_need_a_psa_folder_and_each_other(psa_run, tmp_path):
    code, _ = _cli(["report", str(psa_run), "--output", str(tmp_path / "r.html"), "--population", "100"])
    assert code == 2  # --years missing
    code, _ = _cli(["report", str(SCENARIO), "--output", str(tmp_path / "s.html"), "--years", "5"])
    assert code == 2  # a scenario is no probabilistic analysis
    code, _ = _cli(["report", str(psa_run), "--output", str(tmp_path / "e.html"), "--evppi", "no.such.key"])
    assert code == 2
    assert not list(tmp_path.iterdir())  # nothing written


def test_run_report_lists_the_uncertain_inputs_only_where_the_scenario_has_them():
    from sim.io import demo_scenario
    from sim.report import ReportInputs, report_html

    def scenario_words(scenario) -> str:
        root = ET.fromstring(report_html(ReportInputs(scenario=scenario)).split("\n", 1)[1])
        section = next(s for s in root.iter(f"{XHTML}section") if s.get("id") == "scenario")
        return " ".join(" ".join(section.itertext()).split())

    words = scenario_words(load_scenario(SCENARIO))
    assert "Uncertain inputs (17 parameters" in words
    assert "transitions[2].rate: gamma(shape=25, scale=0.002) (method of moments from mean 0.05, se 0.01)" in words
    assert "Uncertain inputs" not in scenario_words(demo_scenario())

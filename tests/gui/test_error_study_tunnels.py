"""The error-study view says which tunnel-entry rule a semi-Markov study used and how each curve's
error converges (its observed order, issue 11 item 2)."""

from __future__ import annotations

import math

import pytest

from gui.results.error_study import ErrorStudyView, study_order
from sim.io import demo_path, load_scenario
from sim.pipeline import run_scenario


@pytest.fixture(scope="module")
def ferrovian():
    scenario = load_scenario(demo_path().parent / "ferrovian_progression.toml")
    return run_scenario(scenario, patients=3_000, seed=4, workers=2)


def test_the_view_names_the_rule_and_the_orders(qtbot, ferrovian):
    view = ErrorStudyView()
    qtbot.addWidget(view)
    view.show_results(ferrovian)
    study = ferrovian.study
    assert study.tunnel_entry == "half-cycle"
    text = view.reference.text()
    assert "half a cycle of time in state credited" in text and 'tunnel_entry = "half-cycle"' in text
    assert "observed order" in text
    outcome, strategy = view.outcome.currentData(), view.strategy.currentData()
    labels = view.panel.legend_labels()
    for key, item in view._curves.items():
        if not item.isVisible():
            continue
        p = study_order(study.orders, outcome, strategy, key)
        sel = study.orders[(study.orders["outcome"] == outcome) & (study.orders["strategy"] == strategy)
                           & (study.orders["method"] == key[0]) & (study.orders["correction"] == key[1])]
        assert (math.isnan(p) and sel["order"].isna().all()) or p == sel["order"].iloc[0]
        expected = f"{key[0]}, {key[1]}" + (f" (order {p:.2g})" if math.isfinite(p) else "")
        assert expected in labels
    assert any("(order " in label for label in labels)

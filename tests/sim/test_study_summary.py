"""The command line's error-study summary says which within-cycle corrections change the decision
(issue 11 item 6), and for a semi-Markov model which tunnel-entry rule the traces used."""

from __future__ import annotations

import io

import pandas as pd
import pytest

from sim.cli.commands import main
from sim.io import demo_path

LANTHIC = str(demo_path().parent / "lanthic_syndrome.toml")


@pytest.fixture(scope="module")
def lanthic_run(tmp_path_factory) -> tuple[str, pd.DataFrame]:
    folder = tmp_path_factory.mktemp("lanthic") / "out"
    out = io.StringIO()
    assert main(["run", LANTHIC, "--patients", "2000", "--format", "csv", "--output", str(folder)], out=out) == 0
    return out.getvalue(), pd.read_csv(folder / "error_study_decisions.csv")


def _summary_rows(text: str) -> dict[tuple[str, str], str]:
    """(method, cycle) -> the last column of the summary table printed by ``run``."""
    lines = text.split("Cycle-based approximations", 1)[1].splitlines()[1:]
    header, rows = lines[0], []
    assert header.rstrip().endswith("decision changes with")
    for line in lines[1:]:
        if not line.strip():
            break
        rows.append(line.split())
    # method, cycle, three error columns, then the corrections (which may hold spaces: "start, end")
    return {(r[0], r[1]): " ".join(r[5:]) for r in rows}


def test_the_corrections_that_flip_the_decision_are_named(lanthic_run):
    text, decisions = lanthic_run
    shown = _summary_rows(text)
    # in the lanthic demo, 2-year matrix-exponential cycles change the decision only with the start
    # correction (the half-cycle row shown keeps it): the summary says "start", not "yes"
    assert shown[("matrix-exponential", "2")] == "start"
    sel = decisions[(decisions["method"] == "matrix-exponential") & (decisions["cycle_length"] == 2.0)]
    assert set(sel.loc[sel["changes_decision"], "correction"]) == {"start"}
    assert not sel.loc[sel["correction"] == "half-cycle", "changes_decision"].any()
    # every row agrees with the decisions table written beside it
    for (method, cycle), named in shown.items():
        rows = decisions[(decisions["method"] == method) & (decisions["cycle_length"].map(lambda h: f"{h:.4g}") == cycle)]
        flipped = [c for c in dict.fromkeys(decisions["correction"]) if rows.loc[rows["correction"] == c,
                                                                                  "changes_decision"].any()]
        assert named == (", ".join(flipped) if flipped else "none")
    assert "Tunnel states" not in text  # a Markov model has none


def test_a_semi_markov_run_names_its_tunnel_rule(tmp_path):
    scenario = str(demo_path().parent / "ferrovian_progression.toml")
    out = io.StringIO()
    assert main(["run", scenario, "--patients", "3000", "--format", "csv", "--output", str(tmp_path / "out")],
                out=out) == 0
    text = out.getvalue()
    assert 'Tunnel states: half a cycle of time in state credited' in text
    assert 'run.tunnel_entry = "half-cycle"' in text and "Observed order of the life-year error" in text

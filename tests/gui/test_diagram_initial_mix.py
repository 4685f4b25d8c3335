"""The diagram marks every state of an initial mix (a share > 0) as initial and lays them out first."""

from __future__ import annotations

from gui.diagram import diagram_edges, layout_states


def _doc(initial) -> dict:
    return {"states": [{"name": "mild"}, {"name": "moderate"}, {"name": "dead", "absorbing": True}],
            "transitions": [{"name": "p", "from": "mild", "to": "moderate"},
                            {"name": "d", "from": "moderate", "to": "dead"}],
            "population": {"initial_state": initial}}


def test_initial_states_of_a_mix_and_per_sex():
    assert diagram_edges(_doc("mild"))[2] == ("mild",)
    assert diagram_edges(_doc({"mild": 0.7, "moderate": 0.3}))[2] == ("mild", "moderate")
    assert diagram_edges(_doc({"mild": 1.0, "moderate": 0.0}))[2] == ("mild",)
    per_sex = {"female": {"mild": 1.0}, "male": {"moderate": 1.0}}
    states, edges, initial = diagram_edges(_doc(per_sex))
    assert initial == ("mild", "moderate")
    assert layout_states(states, edges, initial) == {"mild": (0, 0), "moderate": (0, 1), "dead": (1, 0)}
    assert layout_states(states, edges, "mild") == {"mild": (0, 0), "moderate": (1, 0), "dead": (2, 0)}

"""The bundled demo scenarios (invented diseases and numbers; each file says so at its top)."""

from __future__ import annotations

from pathlib import Path

from ..model.multistate import Model
from .scenario import Scenario, load_scenario

__all__ = ["SCENARIO_DIR", "DEMOS", "demo_path", "demo_scenario", "demo_model"]

SCENARIO_DIR = Path(__file__).resolve().parents[2] / "scenarios"
DEMOS = {
    "lanthic": "lanthic_syndrome.toml",
    "ferrovian": "ferrovian_progression.toml",
    "risk-vs-rate": "constant_hazard_risk_vs_rate.toml",
    "quorrel-psa": "quorrel_psa.toml",  # with [[uncertainty]] inputs: the demo of hazardtrace psa
}


def demo_path(name: str = "lanthic") -> Path:
    """Path of a bundled demo scenario (``scenarios/`` in the source tree)."""
    if name not in DEMOS:
        raise ValueError(f"demo must be one of {sorted(DEMOS)}, got {name!r}")
    path = SCENARIO_DIR / DEMOS[name]
    if not path.exists():
        raise FileNotFoundError(f"{path} not found: the demos ship in the source tree's scenarios/ folder "
                                f"(install HazardTrace from a checkout with 'pip install -e .')")
    return path


def demo_scenario(name: str = "lanthic") -> Scenario:
    return load_scenario(demo_path(name))


def demo_model(name: str = "lanthic") -> Model:
    """The model of a bundled demo scenario (default: the invented illness-death "lanthic syndrome")."""
    return demo_scenario(name).model

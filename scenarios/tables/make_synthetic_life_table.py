"""Write ``synthetic_life_table.csv``: a SYNTHETIC life table, invented for HazardTrace demos.

This is NOT real data. It describes no country, population or year; the parameters below were made
up to give a smooth table of a plausible human shape. Do not use it for any real decision.

Format
------
CSV, UTF-8, ``\\n`` line ends, header ``age,q_female,q_male``; one row per single year of age
0, 1, ..., 109 plus a closing row 110 (the open band 110+) with ``q = 1``. ``q`` is the probability
of dying between exact ages ``x`` and ``x + 1`` (read it with ``kind="q"``), written with 6 significant
digits.

Law
---
Per sex, the hazard on attained age ``a`` (years) is Gompertz-Makeham plus a small infant term,

    h(a) = c + b exp(g a) + A exp(-a / tau),

and ``q_x = 1 - exp(-H_x)`` with the exact band integral

    H_x = c + (b / g) exp(g x) (exp(g) - 1) + A tau (exp(-x / tau) - exp(-(x + 1) / tau)).

Invented parameters (per year): see ``PARAMETERS``. The slopes g (0.094 and 0.088 per year) are near
the human adult value of about 0.085 per year (Finch, Pike & Witten 1990, Science 249:902-905); the
rest was chosen by eye. Pure Gompertz growth continues past age 100 (no late-life plateau): another
simplification of this invented table.

Usage
-----
``python scenarios/tables/make_synthetic_life_table.py [--output PATH]`` (default: next to this
script). The output is deterministic: the same bytes on every run.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

PARAMETERS: dict[str, dict[str, float]] = {
    # Invented numbers, not estimates of any population.
    "female": {"b": 1.8e-5, "g": 0.094, "c": 2.0e-4, "A": 0.015, "tau": 0.25},
    "male": {"b": 4.0e-5, "g": 0.088, "c": 5.0e-4, "A": 0.018, "tau": 0.25},
}
LAST_AGE = 110  # the open band 110+ closes the table with q = 1
DEFAULT_OUTPUT = Path(__file__).with_name("synthetic_life_table.csv")


def band_cumhazard(sex: str, x: float) -> float:
    """Integral of the invented hazard over [x, x + 1) for ``sex`` (closed form, see module notes)."""
    p = PARAMETERS[sex]
    b, g, c, amp, tau = p["b"], p["g"], p["c"], p["A"], p["tau"]
    gomp = (b / g) * math.exp(g * x) * math.expm1(g)
    infant = amp * tau * math.exp(-x / tau) * -math.expm1(-1.0 / tau)
    return c + gomp + infant


def band_q(sex: str, x: float) -> float:
    """q_x = 1 - exp(-H_x), the probability of dying in [x, x + 1)."""
    return -math.expm1(-band_cumhazard(sex, x))


def table_text() -> str:
    """The CSV file content."""
    lines = ["age,q_female,q_male"]
    for age in range(LAST_AGE):
        lines.append(f"{age},{band_q('female', age):.6g},{band_q('male', age):.6g}")
    lines.append(f"{LAST_AGE},1,1")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> Path:
    parser = argparse.ArgumentParser(description="Write the synthetic (invented) HazardTrace life table.")
    parser.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="CSV path to write")
    args = parser.parse_args(argv)
    args.output.write_text(table_text(), encoding="utf-8", newline="\n")
    return args.output


if __name__ == "__main__":
    print(main())

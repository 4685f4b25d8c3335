"""A run's outcomes from per-chunk partial sums: each worker reduces its chunk's per-patient outcomes
to counts, means and (co-)moments, and the client merges them, so the summary of 10^8 patients
never needs their rows in one place.

Merging two samples (n_a, mean_a, M_a) and (n_b, mean_b, M_b), M the sum of (co-)products of
deviations from the mean, uses the pairwise update of Chan, Golub & LeVeque (1983), "Algorithms for
computing the sample variance: analysis and recommendations", The American Statistician 37(3):

    n = n_a + n_b,  d = mean_b - mean_a,  mean = mean_a + d n_b / n,
    M = M_a + M_b + d d^T n_a n_b / n.

The summary and increments are :class:`sim.analysis.OutcomeAccumulator`'s (the same formulas: MCSE
sqrt(var / n), paired and unpaired MCSE of delta costs and effects, the ICER's delta-method MCSE,
NMB), equal to the streamed run's to rounding (the sums are taken in another order). Chunks are
merged in chunk order whatever order they finish in, so the result does not depend on the workers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..analysis.outcomes import INCREMENTAL_COLUMNS, incremental_rows

__all__ = ["Moments", "ChunkSums", "chunk_sums", "RunSums"]


@dataclass(frozen=True)
class Moments:
    """n observations of a vector: their mean and the matrix of summed deviation products."""

    n: int
    mean: np.ndarray
    m2: np.ndarray

    @classmethod
    def of(cls, x: np.ndarray) -> "Moments":
        mean = x.mean(axis=0)
        d = x - mean
        return cls(x.shape[0], mean, d.T @ d)

    def merge(self, other: "Moments") -> "Moments":
        n = self.n + other.n
        d = other.mean - self.mean
        return Moments(n, self.mean + d * (other.n / n), self.m2 + other.m2 + np.outer(d, d) * (self.n * other.n / n))

    def variance(self) -> np.ndarray:
        """The unbiased variances (the diagonal, divided by n - 1; by 1 for one observation)."""
        return np.maximum(np.diag(self.m2) / max(self.n - 1, 1), 0.0)


@dataclass(frozen=True)
class ChunkSums:
    """One chunk's partial sums: per strategy (order of appearance) the outcomes' moments, and per
    strategy other than the comparator the moments of the paired (delta cost, delta effect)."""

    columns: tuple[str, ...]
    strategies: tuple[str, ...]
    outcomes: dict[str, Moments]
    pairs: dict[str, Moments]


def chunk_sums(per_patient: pd.DataFrame, comparator: str, effect: str = "qalys_discounted",
               cost: str = "costs_discounted") -> ChunkSums:
    """The partial sums of one chunk of :func:`sim.analysis.patient_outcomes` rows (every strategy
    for the same patients)."""
    cols = tuple(c for c in per_patient.columns if c not in ("strategy", "patient"))
    groups = {s: g for s, g in per_patient.groupby("strategy", sort=False, observed=True)}
    outcomes = {s: Moments.of(g[list(cols)].to_numpy(dtype=float)) for s, g in groups.items()}
    pairs: dict[str, Moments] = {}
    if comparator in groups:
        base = groups[comparator].set_index("patient")
        for s, g in groups.items():
            if s == comparator:
                continue
            g = g.set_index("patient")
            if not g.index.equals(base.index):
                raise ValueError(f"strategy {s!r} and comparator {comparator!r} must have the same patients")
            dc = g[cost].to_numpy(dtype=float) - base[cost].to_numpy(dtype=float)
            de = g[effect].to_numpy(dtype=float) - base[effect].to_numpy(dtype=float)
            pairs[s] = Moments.of(np.column_stack([dc, de]))
    return ChunkSums(cols, tuple(groups), outcomes, pairs)


@dataclass
class RunSums:
    """The merged partial sums of a run, with ``summary()`` and ``increments()`` as
    :class:`sim.analysis.OutcomeAccumulator` (the pipeline's outcomes stage reads those two)."""

    comparator: str
    wtp: float
    effect: str = "qalys_discounted"
    cost: str = "costs_discounted"
    columns: tuple[str, ...] = ()
    outcomes: dict[str, Moments] = field(default_factory=dict)
    pairs: dict[str, Moments] = field(default_factory=dict)

    def add(self, sums: ChunkSums) -> None:
        """Merge one chunk (call in chunk order for results independent of the workers)."""
        self.columns = self.columns or sums.columns
        for target, source in ((self.outcomes, sums.outcomes), (self.pairs, sums.pairs)):
            for s, m in source.items():
                target[s] = target[s].merge(m) if s in target else m

    def summary(self) -> pd.DataFrame:
        """strategy, outcome, mean, mcse, n — as :func:`sim.analysis.summarise`."""
        rows = []
        for s, m in self.outcomes.items():
            var = m.variance()
            se = np.sqrt(var / m.n) if m.n > 1 else np.full_like(m.mean, np.nan)
            rows += [(s, c, m.mean[j], se[j], m.n) for j, c in enumerate(self.columns)]
        return pd.DataFrame(rows, columns=["strategy", "outcome", "mean", "mcse", "n"])

    def increments(self) -> pd.DataFrame:
        """As :func:`sim.analysis.incremental`: paired and unpaired MCSE of delta costs, delta effects,
        ICER and NMB against the comparator."""
        rows = []
        ic, ie = self.columns.index(self.cost), self.columns.index(self.effect)
        var_b = self.outcomes[self.comparator].variance()
        for s, p in self.pairs.items():
            n = p.n
            m_dc, m_de = p.mean
            v_dc, v_de, cov = p.m2[0, 0] / (n - 1), p.m2[1, 1] / (n - 1), p.m2[0, 1] / (n - 1)
            var_s = self.outcomes[s].variance()
            rows += incremental_rows(s, self.comparator, self.wtp, n, (m_dc, m_de), (v_dc, v_de, cov),
                                     (var_s[ic] + var_b[ic], var_s[ie] + var_b[ie]))
        return pd.DataFrame(rows, columns=INCREMENTAL_COLUMNS)

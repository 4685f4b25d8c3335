"""Means, Monte Carlo standard errors and paired increments from exact sums: built chunk by chunk or
partition by partition and merged in any order, always to the same bits.

:class:`OutcomeAccumulator` keeps, per strategy, the number of patients and the exact sums
(:mod:`sim.analysis.exact_sums`) of every outcome, of its square and of cost x effect; and for each
strategy against the comparator the exact sums of the cross-products C_s C_b, E_s E_b, C_s E_b and
C_b E_s (C cost, E effect, on the same patients). Those are integers, so adding a chunk, merging two
accumulators (:meth:`OutcomeAccumulator.merge`) or summing the whole table at once
(:func:`sim.analysis.summarise`, :func:`sim.analysis.incremental`) give the same state, and every
reported number is computed from it in rational arithmetic and rounded once (an MCSE: the variance
divided by n is rounded, then its square root). A streamed run, a run kept in memory and a run on
any number of Dask workers, with any chunk size, therefore write bit-identical summaries.

With sums S1 = sum x, S2 = sum x^2 over n patients (docs/methods.md, 'Outcomes and increments'):

    mean = S1 / n,  var = (S2 - S1^2 / n) / (n - 1),  MCSE = sqrt(var / n);

paired differences dC = C_s - C_b, dE = E_s - E_b have sum dC^2 = S2(C_s) - 2 sum C_s C_b + S2(C_b) and
sum dC dE = sum C_s E_s - sum C_s E_b - sum C_b E_s + sum C_b E_b, hence their variances and covariance
exactly. ICER = mean dC / mean dE with the delta-method MCSE sqrt((var dC - 2 R cov + R^2 var dE) / n)
/ |mean dE| (R the ICER; first-order Taylor expansion of a ratio, common practice, no source); NMB =
lambda mean dE - mean dC with variance lambda^2 var dE + var dC - 2 lambda cov. Unpaired MCSEs use
var C_s + var C_b (as if the strategies had independent patients; Stout & Goldie 2008, Health Care
Manag Sci 11(4):399-406, on why the paired ones are smaller).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from fractions import Fraction

import numpy as np
import pandas as pd

from .exact_sums import as_fraction, exact_sums, product_terms

__all__ = ["OutcomeAccumulator", "INCREMENTAL_COLUMNS"]

INCREMENTAL_COLUMNS = ["strategy", "comparator", "quantity", "value", "mcse", "mcse_unpaired"]
_CROSS = ("cost x comparator cost", "effect x comparator effect", "cost x comparator effect",
          "comparator cost x effect")


def _root(x: Fraction) -> float:
    """sqrt of a non-negative exact value rounded to a double (then the correctly rounded sqrt)."""
    return math.sqrt(max(float(x), 0.0))


class OutcomeAccumulator:
    """Exact sums of per-patient outcomes (see the module docstring), added chunk by chunk and merged.

    Parameters
    ----------
    comparator : the strategy increments are taken against; None for a summary only.
    willingness_to_pay : lambda of the net monetary benefit.
    effect, cost : the outcome columns of the increments.
    """

    def __init__(self, comparator: str | None, willingness_to_pay: float = 0.0, effect: str = "qalys_discounted",
                 cost: str = "costs_discounted") -> None:
        self.comparator, self.wtp, self.effect, self.cost = comparator, float(willingness_to_pay), effect, cost
        self._cols: tuple[str, ...] | None = None
        self._n: dict[str, int] = {}  # strategy -> patients, in order of first appearance
        self._sums: dict[str, list[int]] = {}  # strategy -> sum x_j, then sum x_j^2, then sum C E (if any)
        self._cross: dict[str, list[int]] = {}  # strategy (not the comparator) -> the _CROSS sums
        self._paired: bool | None = None  # whether the chunks hold the comparator (the same in every chunk)

    # ------------------------------------------------------------------ building
    def add(self, per_patient: pd.DataFrame) -> "OutcomeAccumulator":
        """Add one chunk of :func:`sim.analysis.patient_outcomes` rows (columns strategy, patient, then
        outcomes; every strategy for the same patients in the same order). Returns self."""
        cols = tuple(c for c in per_patient.columns if c not in ("strategy", "patient"))
        if self._cols is None:
            self._cols = cols
        elif cols != self._cols:
            raise ValueError(f"per_patient: outcome columns {list(cols)} differ from the first chunk's "
                             f"{list(self._cols)}")
        groups = {str(s): g for s, g in per_patient.groupby("strategy", sort=False, observed=True)}
        paired = self.comparator is not None and self.comparator in groups
        if self._paired is not None and paired != self._paired and len(groups):
            raise ValueError(f"per_patient: comparator {self.comparator!r} must be in every chunk or in none")
        self._paired = paired if len(groups) else self._paired
        ce = self._ce_columns()
        k = len(cols)
        values = {s: np.asfortranarray(g[list(cols)].to_numpy(dtype=float)) for s, g in groups.items()}
        for s, x in values.items():
            columns = list(x.T)
            pairs = [(c, c) for c in columns] + ([(columns[ce[0]], columns[ce[1]])] if ce else [])
            raw = exact_sums(columns + product_terms(pairs))
            # a product is the exact sum of its two TwoProduct terms: fold each pair into one sum
            self._accumulate(self._sums, s, raw[:k] + [raw[k + 2 * j] + raw[k + 2 * j + 1] for j in range(len(pairs))])
            self._n[s] = self._n.get(s, 0) + x.shape[0]
        if not paired:
            return self
        if ce is None:
            raise ValueError(f"per_patient: columns {self.cost!r} and {self.effect!r} are needed for increments")
        base = groups[self.comparator]["patient"].to_numpy()
        xb = values[self.comparator]
        for s, g in groups.items():
            if s == self.comparator:
                continue
            if not np.array_equal(g["patient"].to_numpy(), base):
                raise ValueError(f"strategy {s!r} and comparator {self.comparator!r} must have the same patients "
                                 f"for paired differences")
            xs = values[s]
            pairs = [(xs[:, ce[0]], xb[:, ce[0]]), (xs[:, ce[1]], xb[:, ce[1]]), (xs[:, ce[0]], xb[:, ce[1]]),
                     (xb[:, ce[0]], xs[:, ce[1]])]
            raw = exact_sums(product_terms(pairs))
            self._accumulate(self._cross, s, [raw[2 * j] + raw[2 * j + 1] for j in range(len(_CROSS))])
        return self

    def _ce_columns(self) -> tuple[int, int] | None:
        cols = self._cols or ()
        if self.cost in cols and self.effect in cols:
            return cols.index(self.cost), cols.index(self.effect)
        return None

    @staticmethod
    def _accumulate(target: dict[str, list[int]], s: str, sums: list[int]) -> None:
        old = target.get(s)
        target[s] = list(sums) if old is None else [a + b for a, b in zip(old, sums)]

    def merge(self, other: "OutcomeAccumulator") -> "OutcomeAccumulator":
        """Add ``other``'s sums to these (exact, so the order of merging does not change any number;
        strategies keep their order of first appearance). Returns self."""
        if (other.comparator, other.wtp, other.effect, other.cost) != (self.comparator, self.wtp, self.effect,
                                                                          self.cost):
            raise ValueError("accumulators to merge must have the same comparator, willingness to pay, effect "
                             "and cost")
        if other._cols is None:
            return self
        if self._cols is not None and other._cols != self._cols:
            raise ValueError(f"accumulators to merge have different outcomes: {list(self._cols)} and "
                             f"{list(other._cols)}")
        if self._paired is not None and other._paired is not None and self._paired != other._paired:
            raise ValueError(f"comparator {self.comparator!r} must be in every chunk or in none")
        self._cols = other._cols
        self._paired = other._paired if self._paired is None else self._paired
        for target, source in ((self._sums, other._sums), (self._cross, other._cross)):
            for s, sums in source.items():
                self._accumulate(target, s, sums)
        for s, n in other._n.items():
            self._n[s] = self._n.get(s, 0) + n
        return self

    @classmethod
    def combine(cls, parts: Iterable["OutcomeAccumulator"]) -> "OutcomeAccumulator":
        """One accumulator holding the sums of ``parts`` (e.g. a run's partitions, in partition order,
        which fixes the order of the strategies)."""
        out: OutcomeAccumulator | None = None
        for part in parts:
            if out is None:
                out = cls(part.comparator, part.wtp, part.effect, part.cost)
            out.merge(part)
        if out is None:
            raise ValueError("parts: nothing to combine")
        return out

    # ------------------------------------------------------------------ results
    def _moments(self, s: str) -> tuple[int, list[Fraction], list[Fraction]]:
        """n, exact sums and exact sums of squares of strategy ``s``."""
        k = len(self._cols or ())
        sums = self._sums[s]
        return self._n[s], [as_fraction(v) for v in sums[:k]], [as_fraction(v) for v in sums[k:2 * k]]

    @staticmethod
    def _variance(n: int, s1: Fraction, s2: Fraction) -> Fraction:
        return (s2 - s1 * s1 / n) / (n - 1)

    def summary(self) -> pd.DataFrame:
        """strategy, outcome, mean, mcse, n (MCSE NaN for a single patient); as :func:`sim.analysis.summarise`."""
        rows = []
        for s in self._n:
            n, s1, s2 = self._moments(s)
            for j, c in enumerate(self._cols or ()):
                se = _root(self._variance(n, s1[j], s2[j]) / n) if n > 1 else np.nan
                rows.append((s, c, float(s1[j] / n), se, n))
        return pd.DataFrame(rows, columns=["strategy", "outcome", "mean", "mcse", "n"])

    def increments(self) -> pd.DataFrame:
        """strategy, comparator, quantity (delta_costs, delta_effects, icer, nmb), value, mcse (paired),
        mcse_unpaired; as :func:`sim.analysis.incremental`."""
        rows: list[tuple] = []
        ce = self._ce_columns()
        b = self.comparator
        if not self._paired or ce is None or b not in self._n:
            return pd.DataFrame(rows, columns=INCREMENTAL_COLUMNS)
        ic, ie = ce
        k = len(self._cols or ())
        n, sb1, sb2 = self._moments(b)
        ce_b = as_fraction(self._sums[b][2 * k])
        lam = Fraction(self.wtp)
        nan = float("nan")
        for s, cross in self._cross.items():
            _, ss1, ss2 = self._moments(s)
            ce_s = as_fraction(self._sums[s][2 * k])
            x_cc, x_ee, x_ce, x_ec = (as_fraction(v) for v in cross)
            d_c, d_e = ss1[ic] - sb1[ic], ss1[ie] - sb1[ie]  # sums of the paired differences
            m_dc, m_de = d_c / n, d_e / n
            rows_of = [("delta_costs", m_dc), ("delta_effects", m_de)]
            if n < 2:
                rows += [(s, b, q, float(v), nan, nan) for q, v in rows_of]
                icer = float(m_dc / m_de) if m_de else nan
                rows += [(s, b, "icer", icer, nan, nan), (s, b, "nmb", float(lam * m_de - m_dc), nan, nan)]
                continue
            v_dc = self._variance(n, d_c, ss2[ic] - 2 * x_cc + sb2[ic])
            v_de = self._variance(n, d_e, ss2[ie] - 2 * x_ee + sb2[ie])
            cov = (ce_s - x_ce - x_ec + ce_b - d_c * d_e / n) / (n - 1)
            u_c = self._variance(n, ss1[ic], ss2[ic]) + self._variance(n, sb1[ic], sb2[ic])
            u_e = self._variance(n, ss1[ie], ss2[ie]) + self._variance(n, sb1[ie], sb2[ie])
            if m_de:
                r = m_dc / m_de
                icer, se_icer = float(r), _root((v_dc - 2 * r * cov + r * r * v_de) / (n * m_de * m_de))
                se_icer_u = _root((u_c + r * r * u_e) / (n * m_de * m_de))
            else:
                icer = se_icer = se_icer_u = nan
            rows += [
                (s, b, "delta_costs", float(m_dc), _root(v_dc / n), _root(u_c / n)),
                (s, b, "delta_effects", float(m_de), _root(v_de / n), _root(u_e / n)),
                (s, b, "icer", icer, se_icer, se_icer_u),
                (s, b, "nmb", float(lam * m_de - m_dc), _root((lam * lam * v_de + v_dc - 2 * lam * cov) / n),
                 _root((lam * lam * u_e + u_c) / n)),
            ]
        return pd.DataFrame(rows, columns=INCREMENTAL_COLUMNS)

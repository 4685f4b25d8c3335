"""Health-economic outcomes with one set of definitions for simulated, exact and cohort results.

Outcomes per strategy (all to the horizon; docs/methods.md, 'Outcomes and increments'):

- ``life_years``: time alive (in non-absorbing states); ``life_years_discounted`` at the effects rate;
- ``qalys`` and ``qalys_discounted``: sum over states of utility x (discounted) time in the state;
- ``costs`` and ``costs_discounted``: per-year state costs x (discounted) time in the state, plus
  one-off transition costs, discounted at the moment of the move;
- ``years in <state>``: undiscounted time in each living state.

Discounting is continuous at delta = ln(1 + d): a sojourn t0..t1 accrues
(exp(-delta t0) - exp(-delta t1)) / delta and a one-off cost at t is multiplied by exp(-delta t).

Between strategies (against a comparator): incremental costs and QALYs (discounted), the ICER
dC / dE and the net monetary benefit NMB = lambda dE - dC at willingness to pay lambda. From a
simulation each comes with a Monte Carlo standard error computed on paired per-patient differences
(common random numbers: the same patient ids in every strategy), which is smaller than the unpaired
one when outcomes are positively correlated (Stout & Goldie 2008, Health Care Manag Sci
11(4):399-406). The ICER's MCSE is by the delta method: Var(dC/dE) ~ (Var dC - 2 R Cov + R^2 Var dE)
/ (n dE^2) with R the ICER (from memory; standard first-order Taylor expansion of a ratio).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..engine.histories import SimulationResult
from ._event_log import _prepare_log
from .time_in_state import _per_patient
from ..model.multistate import Model

__all__ = ["OUTCOMES", "OutcomeAccumulator", "patient_outcomes", "summarise", "incremental", "outcome_names",
           "increments_from_values", "combine_outcomes"]

OUTCOMES = ("life_years", "life_years_discounted", "qalys", "qalys_discounted", "costs", "costs_discounted")


def outcome_names(model: Model) -> tuple[str, ...]:
    """The economic outcomes, then ``years in <state>`` for each living state."""
    return OUTCOMES + tuple(f"years in {s.name}" for s in model.states if not s.absorbing)


def combine_outcomes(model: Model, strategy: str, years: NDArray, years_e: NDArray, years_c: NDArray,
             moves_c: NDArray) -> dict[str, NDArray]:
    """Outcomes from time in state (undiscounted, at the effects rate, at the costs rate; last axis =
    states) and discounted one-off costs already summed per unit (``moves_c``)."""
    utility, cost = model.state_values(strategy)
    alive = np.array([not s.absorbing for s in model.states])
    out = {
        "life_years": years[..., alive].sum(axis=-1),
        "life_years_discounted": years_e[..., alive].sum(axis=-1),
        "qalys": years @ utility,
        "qalys_discounted": years_e @ utility,
    }
    one_off_undiscounted, one_off_discounted = moves_c
    out["costs"] = years @ cost + one_off_undiscounted
    out["costs_discounted"] = years_c @ cost + one_off_discounted
    for j, s in enumerate(model.states):
        if not s.absorbing:
            out[f"years in {s.name}"] = years[..., j]
    return out


# ----------------------------------------------------------------------------- simulation
def patient_outcomes(run: SimulationResult) -> pd.DataFrame:
    """Per-patient outcomes of a simulation: columns strategy, patient, then :func:`outcome_names`."""
    model, val = run.model, run.model.valuation
    d_c = np.log1p(val.discount_costs)
    frames = []
    for strategy in run.metadata.get("strategies", model.strategy_names):
        ev, pt = run.strategy(strategy)
        log = _prepare_log(ev, pt, model.state_names, strategy)
        yrs = _per_patient(log, 0.0)
        yrs_e = _per_patient(log, val.discount_effects)
        yrs_c = _per_patient(log, val.discount_costs)
        # one-off costs at each move, by the model's exit numbering
        cost_of_exit = model.exit_costs(strategy)
        codes = ev["transition"].cat.codes.to_numpy()
        c = cost_of_exit[codes]
        pid = np.searchsorted(yrs.index.to_numpy(), ev["patient"].to_numpy())
        undisc = np.bincount(pid, weights=c, minlength=len(yrs))
        disc = np.bincount(pid, weights=c * np.exp(-d_c * ev["time"].to_numpy()), minlength=len(yrs))
        values = combine_outcomes(model, strategy, yrs.to_numpy(), yrs_e.to_numpy(), yrs_c.to_numpy(), (undisc, disc))
        frame = pd.DataFrame(values)
        frame.insert(0, "patient", yrs.index.to_numpy())
        frame.insert(0, "strategy", strategy)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def summarise(per_patient: pd.DataFrame) -> pd.DataFrame:
    """Mean and Monte Carlo standard error (s / sqrt(n)) of every outcome per strategy (tidy)."""
    cols = [c for c in per_patient.columns if c not in ("strategy", "patient")]
    rows = []
    for strategy, g in per_patient.groupby("strategy", sort=False):
        n = len(g)
        for c in cols:
            x = g[c].to_numpy()
            rows.append((strategy, c, x.mean(), x.std(ddof=1) / np.sqrt(n) if n > 1 else np.nan, n))
    return pd.DataFrame(rows, columns=["strategy", "outcome", "mean", "mcse", "n"])


def incremental(per_patient: pd.DataFrame, comparator: str, willingness_to_pay: float,
                effect: str = "qalys_discounted", cost: str = "costs_discounted") -> pd.DataFrame:
    """Incremental analysis of every strategy against ``comparator`` with paired and unpaired MCSE.

    Returns columns strategy, comparator, quantity (delta_costs, delta_effects, icer, nmb), value,
    mcse (paired: from per-patient differences), mcse_unpaired (as if the strategies had independent
    patients).
    """
    if comparator not in set(per_patient["strategy"]):
        raise ValueError(f"comparator must be one of {sorted(set(per_patient['strategy']))}, got {comparator!r}")
    base = per_patient[per_patient["strategy"] == comparator].set_index("patient")
    rows = []
    for strategy, g in per_patient.groupby("strategy", sort=False):
        if strategy == comparator:
            continue
        g = g.set_index("patient")
        if not g.index.equals(base.index):
            raise ValueError(f"strategy {strategy!r} and comparator {comparator!r} must have the same patients "
                             f"for paired differences")
        dc = g[cost].to_numpy() - base[cost].to_numpy()
        de = g[effect].to_numpy() - base[effect].to_numpy()
        n = dc.size
        m_dc, m_de = dc.mean(), de.mean()
        v_dc, v_de = dc.var(ddof=1), de.var(ddof=1)
        cov = np.cov(dc, de, ddof=1)[0, 1]
        unpaired = lambda col: np.sqrt((g[col].var(ddof=1) + base[col].var(ddof=1)) / n)  # noqa: E731
        icer = m_dc / m_de if m_de != 0 else np.nan
        se_icer = np.sqrt(max(v_dc - 2 * icer * cov + icer**2 * v_de, 0.0) / n) / abs(m_de) if m_de != 0 else np.nan
        cov_u = 0.0  # independent samples
        v_dc_u = g[cost].var(ddof=1) + base[cost].var(ddof=1)
        v_de_u = g[effect].var(ddof=1) + base[effect].var(ddof=1)
        se_icer_u = (np.sqrt(max(v_dc_u - 2 * icer * cov_u + icer**2 * v_de_u, 0.0) / n) / abs(m_de)
                     if m_de != 0 else np.nan)
        nmb = willingness_to_pay * de - dc
        nmb_u = np.sqrt(willingness_to_pay**2 * v_de_u + v_dc_u) / np.sqrt(n)
        rows += [
            (strategy, comparator, "delta_costs", m_dc, np.sqrt(v_dc / n), unpaired(cost)),
            (strategy, comparator, "delta_effects", m_de, np.sqrt(v_de / n), unpaired(effect)),
            (strategy, comparator, "icer", icer, se_icer, se_icer_u),
            (strategy, comparator, "nmb", nmb.mean(), nmb.std(ddof=1) / np.sqrt(n), nmb_u),
        ]
    return pd.DataFrame(rows, columns=["strategy", "comparator", "quantity", "value", "mcse", "mcse_unpaired"])


def increments_from_values(values: pd.DataFrame, comparator: str, willingness_to_pay: float,
                           effect: str = "qalys_discounted", cost: str = "costs_discounted") -> pd.DataFrame:
    """Incremental analysis from deterministic per-strategy values (columns strategy, outcome, value):
    returns strategy, comparator, delta_costs, delta_effects, icer, nmb."""
    wide = values.pivot_table(index="strategy", columns="outcome", values="value", sort=False)
    if comparator not in wide.index:
        raise ValueError(f"comparator must be one of {list(wide.index)}, got {comparator!r}")
    rows = []
    for strategy in wide.index:
        if strategy == comparator:
            continue
        dc = wide.loc[strategy, cost] - wide.loc[comparator, cost]
        de = wide.loc[strategy, effect] - wide.loc[comparator, effect]
        rows.append((strategy, comparator, dc, de, dc / de if de != 0 else np.nan, willingness_to_pay * de - dc))
    return pd.DataFrame(rows, columns=["strategy", "comparator", "delta_costs", "delta_effects", "icer", "nmb"])


# ----------------------------------------------------------------------------- streaming summaries
class OutcomeAccumulator:
    """Means, MCSEs and paired increments accumulated chunk by chunk (bounded memory for runs too
    large to keep every patient's outcomes).

    Moments are kept as shifted sums (shift = the first chunk's mean) so that variances do not
    suffer from cancellation; merging chunks this way gives the same mean and variance as the whole
    sample (up to rounding). Paired increments need the same patient ids in every strategy within a
    chunk, which :func:`sim.engine.simulate_chunks` guarantees.
    """

    def __init__(self, comparator: str, willingness_to_pay: float, effect: str = "qalys_discounted",
                 cost: str = "costs_discounted") -> None:
        self.comparator, self.wtp, self.effect, self.cost = comparator, float(willingness_to_pay), effect, cost
        self._cols: list[str] | None = None
        self._strategies: list[str] = []
        self._n: dict[str, int] = {}
        self._shift: dict[str, np.ndarray] = {}
        self._s1: dict[str, np.ndarray] = {}
        self._s2: dict[str, np.ndarray] = {}
        self._pairs: dict[str, np.ndarray] = {}  # per strategy: n, shift(2), sums of dC, dE, dC^2, dE^2, dCdE
        self._base_unpaired: dict[str, tuple] = {}

    def add(self, per_patient: pd.DataFrame) -> None:
        """Add one chunk of :func:`patient_outcomes` rows (every strategy for the same patients)."""
        cols = [c for c in per_patient.columns if c not in ("strategy", "patient")]
        self._cols = self._cols or cols
        groups = {s: g for s, g in per_patient.groupby("strategy", sort=False)}
        for s, g in groups.items():
            x = g[self._cols].to_numpy(dtype=float)
            if s not in self._n:
                self._strategies.append(s)
                self._n[s] = 0
                self._shift[s] = x.mean(axis=0)
                self._s1[s] = np.zeros(x.shape[1])
                self._s2[s] = np.zeros(x.shape[1])
            d = x - self._shift[s]
            self._n[s] += x.shape[0]
            self._s1[s] += d.sum(axis=0)
            self._s2[s] += (d * d).sum(axis=0)
        if self.comparator not in groups:
            return
        base = groups[self.comparator].set_index("patient")
        for s, g in groups.items():
            if s == self.comparator:
                continue
            g = g.set_index("patient")
            if not g.index.equals(base.index):
                raise ValueError(f"strategy {s!r} and comparator {self.comparator!r} must have the same patients")
            dc = g[self.cost].to_numpy() - base[self.cost].to_numpy()
            de = g[self.effect].to_numpy() - base[self.effect].to_numpy()
            if s not in self._pairs:
                self._pairs[s] = np.array([0.0, dc.mean(), de.mean(), 0, 0, 0, 0, 0])
            acc = self._pairs[s]
            a, b = dc - acc[1], de - acc[2]
            acc[0] += dc.size
            acc[3:] += [a.sum(), b.sum(), (a * a).sum(), (b * b).sum(), (a * b).sum()]

    def _mean_var(self, s: str) -> tuple[np.ndarray, np.ndarray, int]:
        n = self._n[s]
        m1 = self._s1[s] / n
        var = (self._s2[s] - n * m1 * m1) / max(n - 1, 1)
        return self._shift[s] + m1, np.maximum(var, 0.0), n

    def summary(self) -> pd.DataFrame:
        """strategy, outcome, mean, mcse, n — as :func:`summarise`."""
        rows = []
        for s in self._strategies:
            mean, var, n = self._mean_var(s)
            se = np.sqrt(var / n) if n > 1 else np.full_like(mean, np.nan)
            rows += [(s, c, mean[j], se[j], n) for j, c in enumerate(self._cols or [])]
        return pd.DataFrame(rows, columns=["strategy", "outcome", "mean", "mcse", "n"])

    def increments(self) -> pd.DataFrame:
        """As :func:`incremental`: paired and unpaired MCSE of delta costs, delta effects, ICER, NMB."""
        rows = []
        cols = self._cols or []
        ic, ie = cols.index(self.cost), cols.index(self.effect)
        _, var_b, _ = self._mean_var(self.comparator)
        for s, acc in self._pairs.items():
            n = acc[0]
            ma, mb = acc[3] / n, acc[4] / n
            m_dc, m_de = acc[1] + ma, acc[2] + mb
            v_dc = (acc[5] - n * ma * ma) / (n - 1)
            v_de = (acc[6] - n * mb * mb) / (n - 1)
            cov = (acc[7] - n * ma * mb) / (n - 1)
            _, var_s, _ = self._mean_var(s)
            rows += incremental_rows(s, self.comparator, self.wtp, n, (m_dc, m_de), (v_dc, v_de, cov),
                                     (var_s[ic] + var_b[ic], var_s[ie] + var_b[ie]))
        return pd.DataFrame(rows, columns=INCREMENTAL_COLUMNS)


INCREMENTAL_COLUMNS = ["strategy", "comparator", "quantity", "value", "mcse", "mcse_unpaired"]


def incremental_rows(strategy: str, comparator: str, wtp: float, n: int, means: tuple[float, float],
                     paired: tuple[float, float, float], unpaired: tuple[float, float]) -> list[tuple]:
    """Rows of delta costs, delta effects, ICER and NMB with paired and unpaired MCSE (see :func:`incremental`).

    ``means`` are the mean differences (dC, dE) over ``n`` patients, ``paired`` the sample variances of
    the per-patient differences and their covariance (var dC, var dE, cov), ``unpaired`` the sums of
    the two strategies' variances (var C_s + var C_b, var E_s + var E_b). ICER = dC/dE with its MCSE
    by the delta method, SE = sqrt((var dC - 2 ICER cov + ICER^2 var dE) / n) / |dE| (common practice,
    no source); NMB = wtp dE - dC. Shared by :class:`OutcomeAccumulator` and the Dask run's sums.
    """
    m_dc, m_de = means
    v_dc, v_de, cov = paired
    v_dc_u, v_de_u = unpaired
    icer = m_dc / m_de if m_de != 0 else np.nan
    se_icer = np.sqrt(max(v_dc - 2 * icer * cov + icer**2 * v_de, 0.0) / n) / abs(m_de) if m_de else np.nan
    se_icer_u = np.sqrt(max(v_dc_u + icer**2 * v_de_u, 0.0) / n) / abs(m_de) if m_de else np.nan
    v_nmb = wtp**2 * v_de + v_dc - 2 * wtp * cov
    return [
        (strategy, comparator, "delta_costs", m_dc, np.sqrt(v_dc / n), np.sqrt(v_dc_u / n)),
        (strategy, comparator, "delta_effects", m_de, np.sqrt(v_de / n), np.sqrt(v_de_u / n)),
        (strategy, comparator, "icer", icer, se_icer, se_icer_u),
        (strategy, comparator, "nmb", wtp * m_de - m_dc, np.sqrt(max(v_nmb, 0.0) / n),
         np.sqrt((wtp**2 * v_de_u + v_dc_u) / n)),
    ]

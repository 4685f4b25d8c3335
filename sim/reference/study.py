"""The discretization-error study: how much cycle length, rate-to-probability conversion and
within-cycle correction change the answer and the decision.

One call computes the reference (the exact Kolmogorov solution for a Markov model; for a semi-Markov
model a large simulation, whose Monte Carlo standard error is reported: by default the study runs
one, and a run passes its own as ``simulated_reference``) and a grid of cohort
approximations (cycle lengths x conversions x corrections), and returns tidy tables:

- ``table``: outcome, strategy, cycle_length, method, correction, value, reference, error,
  relative_error;
- ``orders``: the observed convergence order p of each (outcome, strategy, method, correction), the
  least-squares slope of log|error| on log(cycle length) (error ~ C h^p);
- ``largest_cycle``: the largest cycle length of the grid such that it and every shorter one keep
  the outcome within the tolerance (absolute or relative);
- ``decisions``: incremental costs and QALYs, ICER and net monetary benefit of each strategy against
  the comparator for every combination, flagging those whose decision differs from the reference's
  (the sign of the net monetary benefit, or the ICER on the other side of the threshold);
- ``jump_over``: the share of patient-cycles with two or more moves under the matrix exponential.

For a semi-Markov model the traces expand time-in-state clocks into tunnel states; ``tunnel_entry``
says how much time in state the patients who enter such a state during a cycle are credited at the
next boundary (:class:`sim.reference.cohort.TunnelEntry`), and the notes name that rule and the
observed order of each conversion's life-year error under it.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from .cohort import Conversion, Correction, TunnelEntry, cohort_trace, trace_outcomes
from ..engine.histories import CancelToken, SimulationCancelled, cancel_requested, simulate
from ..model.multistate import Model
from ..analysis.outcomes import increments_from_values, outcome_names, patient_outcomes, summarise
from .exact_outcomes import exact_outcomes
from ..problems import ValidationError

__all__ = ["DEFAULT_CYCLE_LENGTHS", "TUNNEL_ENTRY_WORDS", "StudyResult", "discretization_study", "observed_order",
           "orders_of", "largest_cycle_within"]

DEFAULT_CYCLE_LENGTHS = (1 / 52, 1 / 12, 1 / 4, 1 / 2, 1.0, 2.0)
MAX_TUNNEL_STATES = 240

TUNNEL_ENTRY_WORDS = {
    TunnelEntry.BOUNDARY.value: "entry into a tunnelled state taken at the next cycle boundary (no time in state "
                                "credited for the part of the cycle after entry: a bias of order h)",
    TunnelEntry.HALF_CYCLE.value: "half a cycle of time in state credited to those entering a tunnelled state "
                                  "during a cycle (half-cycle entry)",
}
"""Each tunnel-entry rule in words, for notes and summaries."""


@dataclass(frozen=True)
class StudyResult:
    table: pd.DataFrame
    reference: pd.DataFrame
    orders: pd.DataFrame
    largest_cycle: pd.DataFrame
    decisions: pd.DataFrame
    jump_over: pd.DataFrame
    reference_kind: str
    notes: list[str] = field(default_factory=list)
    tunnel_entry: str | None = None  # the tunnel-entry rule of a semi-Markov model's traces (None: Markov)


def observed_order(h: np.ndarray, error: np.ndarray, floor: float) -> float:
    """Least-squares slope of log|error| on log h over the points with |error| > floor (NaN if fewer
    than two such points)."""
    h, error = np.asarray(h, dtype=float), np.abs(np.asarray(error, dtype=float))
    keep = error > floor
    if keep.sum() < 2:
        return float("nan")
    return float(np.polyfit(np.log(h[keep]), np.log(error[keep]), 1)[0])


def orders_of(orders: pd.DataFrame, outcome: str, strategy: str, correction: str) -> dict[str, float]:
    """Observed order of each conversion (method -> order) for one outcome, strategy and correction
    of a study's ``orders`` table, in the table's order."""
    sel = orders[(orders["outcome"] == outcome) & (orders["strategy"] == strategy)
                 & (orders["correction"] == correction)]
    return {str(m): float(o) for m, o in zip(sel["method"], sel["order"])}


def _orders_note(orders: pd.DataFrame, strategy: str, rule: str) -> str:
    found = orders_of(orders, "life_years", strategy, Correction.HALF_CYCLE.value)
    text = ", ".join(f"{m} {o:.2g}" if np.isfinite(o) else f"{m} not measurable (errors within the reference's "
                     f"noise)" for m, o in found.items())
    return (f"with tunnel_entry = \"{rule}\", the life-year error of {strategy!r} with the half-cycle correction "
            f"shrinks as h^p with observed order p: {text}")


def default_tunnel_years(model: Model, follow: float) -> float:
    """Time in state worth tracking with tunnel states: until the semi-Markov exits alone would leave
    at most 0.1% of entrants in the state (H = ln 1000), capped by the longest follow-up."""
    names = set(model.semi_markov_transitions())
    longest = 0.0
    for strategy in model.strategy_names:
        for exits in model.resolve(strategy):
            for ex in exits:
                if ex.name in names:
                    for h in ex.hazards:
                        longest = max(longest, float(h.inv_cumhazard(np.log(1000.0))))
    return min(follow, longest) if longest > 0 else follow


def _reference_kind(model: Model, n_patients: int, seed: int) -> str:
    return "exact" if model.is_markov else f"simulation ({n_patients:,} patients, seed {seed})"


REFERENCE_COLUMNS = ("strategy", "outcome", "mean", "mcse")


def _checked_reference(model: Model, simulated: pd.DataFrame) -> pd.DataFrame:
    """A caller's simulated reference (a :func:`summarise` table) as ``strategy, outcome, value,
    mcse``, after checking that it has those columns and every outcome of every strategy."""
    path = ("simulated_reference",)
    if not isinstance(simulated, pd.DataFrame):
        raise ValidationError(path, "must be a pandas DataFrame (a summarise() table)", type(simulated).__name__)
    missing = [c for c in REFERENCE_COLUMNS if c not in simulated.columns]
    if missing:
        raise ValidationError(path, f"must have the columns {list(REFERENCE_COLUMNS)}", list(simulated.columns))
    have = set(zip(simulated["strategy"], simulated["outcome"]))
    needed = [(s, o) for s in model.strategy_names for o in outcome_names(model)]
    absent = [pair for pair in needed if pair not in have]
    if absent:
        raise ValidationError(path, "must hold every outcome of every strategy of the model (value: the missing "
                              "strategy and outcome pairs)", absent)
    ref = simulated[list(REFERENCE_COLUMNS)].rename(columns={"mean": "value"})
    return ref.drop_duplicates(["strategy", "outcome"]).reset_index(drop=True)


def _reference(model: Model, n_patients: int, seed: int, n_nodes: int, cancel,
               simulated: pd.DataFrame | None = None) -> pd.DataFrame:
    if model.is_markov:
        ref = exact_outcomes(model, n_nodes=n_nodes, cancel=cancel)
        ref["mcse"] = 0.0
        return ref
    if simulated is not None:  # already checked by _checked_reference
        return simulated
    run = simulate(model, n_patients, seed, workers=2, cancel=cancel)
    return _checked_reference(model, summarise(patient_outcomes(run)))


def discretization_study(model: Model, cycle_lengths: tuple[float, ...] = DEFAULT_CYCLE_LENGTHS,
                         methods: tuple[str, ...] = tuple(c.value for c in Conversion),
                         corrections: tuple[str, ...] = tuple(c.value for c in Correction),
                         rate_rule: str = "cumulative", entry_ages: str = "strata",
                         tolerance: float = 0.01, relative: bool = True, comparator: str | None = None,
                         willingness_to_pay: float | None = None, tunnel_years: float | None = None,
                         n_patients: int = 200_000, seed: int = 1, n_nodes: int = 16,
                         workers: int = 2, cancel: CancelToken | Callable[[], bool] | None = None,
                         progress: Callable[[int, int], None] | None = None,
                         simulated_reference: pd.DataFrame | None = None,
                         tunnel_entry: str = TunnelEntry.HALF_CYCLE.value) -> StudyResult:
    """Run the reference and the grid of cohort approximations; see the module docstring.

    Parameters
    ----------
    tolerance, relative : the accuracy asked of each outcome (relative to the reference, or in the
        outcome's own unit).
    comparator : strategy the others are compared with (default: the model's first strategy).
    willingness_to_pay : per QALY (default: the model's valuation).
    tunnel_years : for semi-Markov models, how long time-in-state clocks are tracked by tunnel states
        (default: the longest follow-up); cycle lengths needing more than 400 tunnel states are
        skipped with a note.
    n_patients, seed : size and seed of the simulation reference for semi-Markov models (when
        ``simulated_reference`` is given: of the simulation it summarises, for the label).
    n_nodes : entry-age strata, shared by the exact reference and the traces so that the table
        isolates the discretization error (the quadrature error itself is far smaller: about 4e-6
        relative in life expectancy at 16 nodes on the demo model, measured against 64 nodes).
    workers : threads running the independent traces.
    cancel : an object with ``is_set()`` or a callable; checked before each trace (and between the
        chunks of a simulation reference); a request raises :class:`sim.engine.SimulationCancelled`.
    progress : called as ``progress(done, total)`` in the calling thread as the traces finish.
    simulated_reference : for a semi-Markov model, the summary of a simulation already run (columns
        strategy, outcome, mean, mcse, as :func:`sim.analysis.summarise`), used as the reference
        instead of simulating ``n_patients`` histories again: a run passes its own simulation. Ignored
        for a Markov model, whose reference is the exact solution.
    tunnel_entry : for semi-Markov models, time in state credited to patients entering a tunnelled
        state during a cycle: "half-cycle" (default, half a cycle; O(h^2) against O(h) for smooth
        hazards, docs/methods.md, 'Tunnel states and entry within a cycle') or "boundary" (none, the
        rule before issue 11). Named in the notes with the observed orders; ignored for a Markov
        model, which needs no tunnel states.

    Raises
    ------
    sim.problems.ValidationError
        A bad grid, tolerance or ``simulated_reference`` (missing columns, strategies or outcomes).
    """
    if not cycle_lengths or any(not (math.isfinite(h) and h > 0) for h in cycle_lengths):
        raise ValidationError(("cycle_lengths",), "must be positive numbers of years", cycle_lengths)
    if not (math.isfinite(tolerance) and tolerance > 0):
        raise ValidationError(("tolerance",), "must be a number > 0", tolerance)
    if tunnel_entry not in TUNNEL_ENTRY_WORDS:
        raise ValidationError(("tunnel_entry",), f"must be one of {list(TUNNEL_ENTRY_WORDS)}", tunnel_entry)
    comparator = comparator or model.strategy_names[0]
    model.strategy(comparator)
    given = (None if simulated_reference is None or model.is_markov
             else _checked_reference(model, simulated_reference))  # checked before any work
    wtp = model.valuation.willingness_to_pay if willingness_to_pay is None else float(willingness_to_pay)
    names = outcome_names(model)
    kind = _reference_kind(model, n_patients, seed)
    notes: list[str] = []
    if not model.is_markov:
        notes.append(f"no exact reference: transitions {model.semi_markov_transitions()} are semi-Markov; "
                     f"the reference is a {kind} with the Monte Carlo standard errors in 'reference'")
    follow = float(model.horizon.time_limit(np.array([model.population.entry_age.low]))[0])
    if not model.is_markov and tunnel_years is None:
        tunnel_years = default_tunnel_years(model, follow)
        notes.append(f"tunnel states track time in state up to {tunnel_years:.3g} years (until the semi-Markov "
                     f"exits alone would leave at most 0.1% in the state, or the longest follow-up); the last "
                     f"tunnel state keeps the hazard at that duration")
    if not model.is_markov:
        notes.append(f"tunnel states: {TUNNEL_ENTRY_WORDS[tunnel_entry]} (tunnel_entry = \"{tunnel_entry}\")")
    tasks = []
    for h in sorted(cycle_lengths):
        tunnels = None
        if not model.is_markov:
            tunnels = int(math.ceil((tunnel_years or follow) / h - 1e-9))
            if tunnels > MAX_TUNNEL_STATES:
                notes.append(f"cycle length {h:g} skipped: it needs {tunnels} tunnel states (> {MAX_TUNNEL_STATES}); "
                             f"give a shorter tunnel_years")
                continue
        tasks += [(h, method, strategy, tunnels) for method in methods for strategy in model.strategy_names]

    def run(task: tuple) -> tuple[tuple, list[tuple]]:
        if cancel_requested(cancel):
            raise SimulationCancelled("error study cancelled")
        h, method, strategy, tunnels = task
        trace = cohort_trace(model, strategy, h, method, rate_rule, entry_ages, n_nodes, tunnels,
                             tunnel_entry=tunnel_entry)
        out = []
        for corr in corrections:
            values = trace_outcomes(trace, corr)
            out += [(o, strategy, h, method, corr, values[o]) for o in names]
        return (strategy, h, method, trace.jump_over_share, trace.negative_stay), out

    # the reference and the traces are independent; numpy releases the GIL in the traces' heavy
    # steps while the reference's ODE solver runs Python, so they overlap well in threads
    with ThreadPoolExecutor(max_workers=max(1, workers)) as pool:
        reference = pool.submit(_reference, model, n_patients, seed, n_nodes, cancel, given)
        results = []
        for result in pool.map(run, tasks):
            results.append(result)
            if progress is not None:
                progress(len(results), len(tasks))
        ref = reference.result()
    rows = [r for _, chunk in results for r in chunk]
    jump_rows = [j for j, _ in results]
    table = pd.DataFrame(rows, columns=["outcome", "strategy", "cycle_length", "method", "correction", "value"])
    table = table.merge(ref[["strategy", "outcome", "value", "mcse"]].rename(
        columns={"value": "reference", "mcse": "reference_mcse"}), on=["strategy", "outcome"], how="left")
    table["error"] = table["value"] - table["reference"]
    with np.errstate(divide="ignore", invalid="ignore"):
        table["relative_error"] = np.where(table["reference"] != 0, table["error"] / table["reference"].abs(), np.nan)

    # observed convergence orders
    order_rows = []
    for key, g in table.groupby(["outcome", "strategy", "method", "correction"], sort=False):
        scale = max(1.0, abs(float(g["reference"].iloc[0])))
        floor = max(1e-9 * scale, 2.0 * float(g["reference_mcse"].iloc[0]))
        order_rows.append((*key, observed_order(g["cycle_length"], g["error"], floor)))
    orders = pd.DataFrame(order_rows, columns=["outcome", "strategy", "method", "correction", "order"])
    if not model.is_markov and "life_years" in names and Correction.HALF_CYCLE.value in corrections:
        notes.append(_orders_note(orders, model.strategy_names[0], tunnel_entry))

    largest_cycle = largest_cycle_within(table, tolerance, relative)

    decisions = _decisions(table, ref, comparator, wtp) if len(model.strategies) > 1 else pd.DataFrame()
    jump = pd.DataFrame(jump_rows, columns=["strategy", "cycle_length", "method", "jump_over_share", "negative_stay"])
    return StudyResult(table=table, reference=ref.assign(kind=kind), orders=orders, largest_cycle=largest_cycle,
                       decisions=decisions, jump_over=jump, reference_kind=kind, notes=notes,
                       tunnel_entry=None if model.is_markov else tunnel_entry)


def largest_cycle_within(table: pd.DataFrame, tolerance: float, relative: bool = True) -> pd.DataFrame:
    """Largest cycle length of the grid such that it and every shorter one keep each (outcome,
    strategy, method, correction) within ``tolerance`` (of the reference when ``relative``, else in
    the outcome's unit); NaN when even the shortest fails. Works on a study table, so a new
    tolerance needs no new study."""
    if not (np.isfinite(tolerance) and tolerance > 0):
        raise ValidationError(("tolerance",), "must be a number > 0", tolerance)
    keys = ["outcome", "strategy", "method", "correction"]
    measure = "relative_error" if relative else "error"
    t = table.sort_values("cycle_length", kind="stable")
    ok = (t[measure].abs() <= tolerance).to_numpy()
    # within each group (sorted by cycle length) a cycle is safe while neither it nor a shorter one failed
    failed_so_far = pd.Series(~ok, index=t.index).groupby([t[k] for k in keys], sort=False).cummax().to_numpy()
    safe_h = np.where(failed_so_far, np.nan, t["cycle_length"].to_numpy(float))
    largest = (pd.DataFrame({k: t[k].to_numpy() for k in keys} | {"h": safe_h})
               .groupby(keys, sort=False)["h"].max())
    out = table[keys].drop_duplicates().merge(largest.rename("largest_cycle_length").reset_index(), on=keys,
                                             how="left")
    out.insert(4, "tolerance", float(tolerance))
    out.insert(5, "tolerance_kind", "relative" if relative else "absolute")
    return out.reset_index(drop=True)


def _decisions(table: pd.DataFrame, ref: pd.DataFrame, comparator: str, wtp: float) -> pd.DataFrame:
    """Increments of every strategy against the comparator for each (cycle length, method,
    correction), with the decision flags; one pivot for the whole grid."""
    ref_inc = increments_from_values(ref, comparator, wtp).set_index("strategy")
    keys = ["cycle_length", "method", "correction"]
    wide = table[table["outcome"].isin(["costs_discounted", "qalys_discounted"])].pivot_table(
        index=[*keys, "strategy"], columns="outcome", values="value", sort=False)
    base = wide.xs(comparator, level="strategy")
    others = wide.drop(index=comparator, level="strategy")
    base_aligned = base.reindex(others.index.droplevel("strategy"))
    dc = others["costs_discounted"].to_numpy() - base_aligned["costs_discounted"].to_numpy()
    de = others["qalys_discounted"].to_numpy() - base_aligned["qalys_discounted"].to_numpy()
    out = others.index.to_frame(index=False)
    out["comparator"] = comparator
    out["delta_costs"] = dc
    out["delta_effects"] = de
    with np.errstate(divide="ignore", invalid="ignore"):
        out["icer"] = np.where(de != 0, dc / de, np.nan)
    out["nmb"] = wtp * de - dc
    r = ref_inc.loc[out["strategy"]]
    out["reference_nmb"] = r["nmb"].to_numpy()
    out["reference_icer"] = r["icer"].to_numpy()
    sign_flip = np.sign(out["nmb"].to_numpy()) != np.sign(out["reference_nmb"].to_numpy())
    both_gain = (out["delta_effects"].to_numpy() > 0) & (r["delta_effects"].to_numpy() > 0)
    icer_cross = both_gain & ((out["icer"].to_numpy() <= wtp) != (out["reference_icer"].to_numpy() <= wtp))
    out["changes_decision"] = sign_flip | icer_cross
    out["willingness_to_pay"] = wtp
    return out

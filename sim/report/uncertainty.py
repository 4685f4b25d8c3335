"""The report's uncertainty section: the results of a probabilistic analysis (``hazardtrace psa``).

From the summary tables as :func:`sim.psa.psa_summaries` names them (``incremental``, ``ce_plane``,
``ceac``, ``acceptability_frontier``, ``evpi``, ``noise_share``, ``convergence``,
``acceptability_by_method``, ``evpi_by_method``), plus ``inputs`` (:func:`sim.psa.inputs_table`),
``population_evpi`` (:func:`sim.uncertainty.population_evpi` of the ``evpi`` rows of the reference
method) and ``evppi`` (:func:`sim.uncertainty.evppi`) where computed: the uncertain inputs, the
incremental results, the cost-effectiveness plane, the acceptability curves and frontier, EVPI per
patient (and for the population) against the willingness to pay, EVPPI, the patient-level noise
share and the convergence of the incremental net benefit. A table under any other name is shown as
it is, titled by its name.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from html import escape

import numpy as np
import pandas as pd

from ..io import Scenario
from ..uncertainty import differing_wtp_ranges
from .numbers import formatted_frame, significant
from .plots import method_words
from .psa_plots import acceptability_svg, ce_plane_svg, convergence_svg, evpi_svg
from .psa_tables import (ceac_shown, estimate_text, evpi_methods_shown, evpi_shown, evppi_shown, incremental_shown,
                         inputs_shown, noise_shown, ranges_shown, wtp_points)

__all__ = ["uncertainty_body", "KNOWN_TABLES", "DIFFERENCE_THRESHOLD"]

KNOWN_TABLES = ("inputs", "incremental", "ce_plane", "ceac", "acceptability_frontier", "evpi", "population_evpi",
                "evpi_by_method", "acceptability_by_method", "evppi", "noise_share", "convergence")
#: a method's probability of being cost-effective "differs" from the reference's by more than this
DIFFERENCE_THRESHOLD = 0.05

Html = Callable[..., str]


def _reference(tables: Mapping[str, pd.DataFrame]) -> str:
    methods = set()
    for name in ("incremental", "evpi", "ceac"):
        if name in tables:
            methods |= set(map(str, tables[name]["method"]))
    return "exact" if "exact" in methods else "simulated"


def _numeric(shown: pd.DataFrame, words: tuple[str, ...] = ("method", "strategy", "parameter", "distribution",
                                                            "how fitted", "quadrant", "outcome", "optimal strategy now",
                                                            "highest expected net benefit", "parameters",
                                                            "capped at EVPI", "95% interval")) -> list[str]:
    return [c for c in shown.columns if c not in words]


def uncertainty_body(tables: Mapping[str, pd.DataFrame], scenario: Scenario | None, metadata: Mapping,
                     table: Html, keep: Callable[[str], str], p: Callable[..., str], figure: Callable[[str, str], str]
                     ) -> str:
    """The section's body (HTML) from the tables; ``table``, ``keep``, ``p`` and ``figure`` are the
    document's HTML helpers (:mod:`sim.report.document`)."""
    v = scenario.model.valuation if scenario is not None else None
    currency = v.currency if v is not None else ""
    wtp = float(v.willingness_to_pay) if v is not None else 0.0
    ref = _reference(tables)
    parts: list[str] = []
    draws = metadata.get("draws")
    if draws is None and "ce_plane" in tables:
        draws = int((tables["ce_plane"]["point"] == "draw").sum() / max(1, tables["ce_plane"][["method", "strategy"]]
                                                                     .drop_duplicates().shape[0]))
    methods = list(dict.fromkeys(map(str, tables["incremental"]["method"]))) if "incremental" in tables else []
    if draws:
        n_par = len(metadata.get("parameters") or []) or (len(tables["inputs"]) if "inputs" in tables else 0)
        patients = metadata.get("patients")
        lead = (f"A probabilistic analysis: {int(draws):,} parameter draws of {n_par} uncertain parameters"
                + (f", {int(patients):,} simulated patients per draw and strategy (common random numbers across "
                   f"strategies)" if patients else "") + (f", seed {metadata['seed']}" if "seed" in metadata else "")
                + ". Methods on the same draws: " + (", ".join(method_words(m) for m in methods) or "none")
                + f". The reference method is {ref!r}. Costs and QALYs are discounted, per patient"
                + (f"; willingness to pay {wtp:,.0f} {currency} per QALY" if v is not None else "") + ".")
        parts.append(p(lead))
    if "inputs" in tables and len(tables["inputs"]):
        shown = inputs_shown(tables["inputs"])
        parts.append(keep("<h3>Uncertain inputs</h3>" + p(
            "Each uncertain parameter's distribution (native parameters; a multivariate or Dirichlet group is "
            "stated at its first member), how it was fitted, its mean and central 95% interval, and the value the "
            "deterministic run uses.")) + table(shown, ["mean"], cls="psa-inputs"))
    if "incremental" in tables:
        shown = incremental_shown(tables["incremental"], int(draws or 1), currency)
        parts.append(keep("<h3>Incremental results</h3>" + p(
            "Mean increments over the draws against the comparator, each with its Monte Carlo standard error over "
            "the draws (SD / √N) and its SD (parameter uncertainty); the ICER is the ratio of the mean increments.")
            + table(shown, _numeric(shown), cls="psa-incremental")))
    if "ce_plane" in tables and len(tables["ce_plane"]):
        parts.append("<h3>Cost-effectiveness plane</h3>" + figure(
            ce_plane_svg(tables["ce_plane"], wtp, currency, "psa1"),
            "Each draw's incremental QALYs and costs (small points, one colour per method) and their mean (large "
            "points); draws below the dashed willingness-to-pay line are cost-effective."))
    if "ceac" in tables and "acceptability_frontier" in tables:
        ceac, frontier = tables["ceac"], tables["acceptability_frontier"]
        at = float(ceac["wtp"].iloc[int(np.abs(ceac["wtp"].to_numpy(float) - wtp).argmin())])
        body = "<h3>Acceptability</h3>" + figure(
            acceptability_svg(ceac, frontier, wtp, currency, "psa2"),
            "Left: probability that each strategy has the highest net benefit (van Hout et al. 1994; Fenwick, "
            "Claxton & Sculpher 2001). Right: the acceptability frontier, the probability for the strategy with the "
            "highest expected net benefit (dots: where that strategy changes). One colour per method, line style by "
            "within-cycle correction; the vertical line marks the scenario's willingness to pay.")
        shown = ceac_shown(ceac, frontier, at)
        body += keep(p(f"At {at:,.0f} {currency} per QALY (binomial MCSE over the draws):")
                     + table(shown, ["probability cost-effective", "MCSE"], cls="psa-ceac"))
        if "acceptability_by_method" in tables:
            ranges = differing_wtp_ranges(tables["acceptability_by_method"], DIFFERENCE_THRESHOLD)
            if len(ranges):
                shown = ranges_shown(ranges, currency)
                body += keep(p(f"Willingness-to-pay ranges where a method's probability of being cost-effective "
                               f"differs from the {ref} one's by more than {DIFFERENCE_THRESHOLD:g} (on the same "
                               f"draws; ranges given by their grid points):")
                             + table(shown, _numeric(shown), cls="psa-ranges"))
            else:
                body += p(f"No method's probability of being cost-effective differs from the {ref} one's by more "
                          f"than {DIFFERENCE_THRESHOLD:g} anywhere on the willingness-to-pay grid.")
        parts.append(body)
    if "evpi" in tables:
        evpi = tables["evpi"]
        population = tables.get("population_evpi")
        factor = float(population["population_factor"].iloc[0]) if population is not None and len(population) else None
        body = "<h3>Expected value of perfect information</h3>" + figure(
            evpi_svg(evpi, wtp, currency, "psa3", factor, band=ref),
            f"EVPI per patient against the willingness to pay, one colour per method; shaded: the {ref} method's "
            "95% band (± 1.96 MCSE)" + ("; right axis: population EVPI." if factor else "."))
        points = wtp_points(evpi["wtp"].to_numpy(float), wtp)
        shown = evpi_shown(evpi, ref, points, currency, population)
        words = (f"EVPI per patient of the {ref} method (Raiffa & Schlaifer 1961): the expected loss of deciding on "
                 f"current information; MCSE over the draws.")
        if factor:
            words += (f" Population EVPI: per-patient EVPI times {significant(factor, 4)} discounted patients "
                      f"(the population and years given for the report).")
        else:
            words += (" No population EVPI: give the patients per year and the decision's years "
                      "('hazardtrace report PSA_DIR --population N --years T').")
        body += keep(p(words) + table(shown, _numeric(shown), cls="psa-evpi"))
        if "evpi_by_method" in tables:
            at = float(evpi["wtp"].iloc[int(np.abs(evpi["wtp"].to_numpy(float) - wtp).argmin())])
            shown = evpi_methods_shown(tables["evpi_by_method"], at, currency)
            body += keep(p(f"EVPI per patient of each method at {at:,.0f} {currency} per QALY and its difference "
                           f"from the {ref} one on the same draws (paired MCSE):")
                         + table(shown, _numeric(shown), cls="psa-evpi-methods"))
        parts.append(body)
    if "evppi" in tables and len(tables["evppi"]):
        shown = evppi_shown(tables["evppi"], currency)
        parts.append(keep("<h3>Expected value of partial perfect information</h3>" + p(
            f"EVPPI per patient of each parameter group ({ref} method) by regression of the incremental costs and "
            "QALYs on the group (Strong, Oakley & Brennan 2014, Med Decis Making 34:311), with the EVPI of the same "
            "draws.") + table(shown, _numeric(shown), cls="psa-evppi")))
    elif "evpi" in tables:
        parts.append(p("EVPPI was not computed for this report ('hazardtrace report PSA_DIR --evppi "
                       "\"key, key\"' computes it for a parameter group).", "note"))
    if "noise_share" in tables:
        shown = noise_shown(tables["noise_share"])
        parts.append(keep("<h3>Patient-level noise</h3>" + p(
            "Share of the variance over draws of the simulated outcomes that is patient-level Monte Carlo noise "
            "rather than parameter uncertainty (one-way ANOVA; O'Hagan, Stevenson & Madan 2007, Health Econ "
            "16:1009), and the simulated patients per draw that would bring it down to the target share. The exact "
            "and cycle-based methods have no such noise.") + table(shown, _numeric(shown), cls="psa-noise")))
    if "convergence" in tables and len(tables["convergence"]):
        conv = tables["convergence"]
        last = conv[conv["draws"] == conv["draws"].max()]
        final = "; ".join(f"{r.strategy}: {t} ({m}) {currency}" for r, t, m in
                          zip(last.itertuples(), estimate_text(last["mean"], last["mcse"]),
                              estimate_text(last["mcse"], last["mcse"])))
        parts.append("<h3>Convergence over draws</h3>" + figure(
            convergence_svg(conv, currency, "psa4"),
            "Running mean of the incremental net benefit (simulated method) as draws accumulate, with its 95% band "
            f"(± 1.96 MCSE). After all draws: {final} (mean (MCSE))."))
    for name, extra in tables.items():
        if name in KNOWN_TABLES:
            continue
        shown = formatted_frame(extra)
        parts.append(f"<h3>{escape(name)}</h3>" + table(shown, [c for c in extra.columns
                                                                if pd.api.types.is_numeric_dtype(extra[c].dtype)]))
    return "".join(parts)


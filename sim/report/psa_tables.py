"""The probabilistic analysis's tables as the report shows them (shown text only, no HTML): the
uncertain inputs, incremental results, acceptability and EVPI at chosen willingness-to-pay values,
EVPI of each method against the reference, EVPPI and the patient-level noise share.

Numbers follow :mod:`sim.analysis.display`: an estimate with a Monte Carlo standard error is shown to
the decimal place of the second significant digit of its MCSE (:func:`sim.analysis.decimals_from_mcse`;
where the MCSE is 0, e.g. an EVPI of exactly 0, the column's five significant figures,
:func:`sim.analysis.column_decimals`), thousands separated by commas (:func:`sim.analysis.format_fixed`).
The mean increments' MCSE over the draws is ``SD / sqrt(N)`` (independent draws). Inputs (means and
intervals of distributions, not estimates) are shown to four significant figures.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..analysis import column_decimals, decimals_from_mcse, format_fixed
from ..psa.summaries import wtp_points
from .numbers import significant
from .plots import method_words

__all__ = ["estimate_text", "means_shown", "inputs_shown", "incremental_shown", "wtp_points", "ceac_shown",
           "evpi_shown", "evpi_methods_shown", "noise_shown", "evppi_shown", "ranges_shown"]


def estimate_text(values, mcse) -> list[str]:
    """Each value to the decimal place of its MCSE's second significant digit (the column's
    decimals where the MCSE is 0 or missing)."""
    v = np.asarray(values, dtype=float)
    d = decimals_from_mcse(np.asarray(mcse, dtype=float))
    fallback = np.broadcast_to(column_decimals(v), v.shape)
    d = np.where(d >= 0, d, fallback)
    return [format_fixed(float(x), int(k)) for x, k in zip(v, d)]


def inputs_shown(inputs: pd.DataFrame) -> pd.DataFrame:
    """One row per uncertain parameter (:func:`sim.psa.inputs_table`): key, distribution with its
    parameters, how it was fitted, mean, 95% interval and the deterministic run's value."""
    rows = []
    previous = None
    for r in inputs.itertuples(index=False):
        same_group = r.group == previous
        previous = r.group
        given = {part.split(" ")[0] for part in str(r.fitted_from).split(", ")} if r.fitted_from else set()
        fitted = (f"method of moments from {r.fitted_from}" if given and given <= {"mean", "se", "sample_size"}
                  else f"from {r.fitted_from}" if r.fitted_from else "parameters given")
        point = significant(r.point_value, 4) + ("" if r.point_from_file else " (the mean: not in the file)")
        if same_group:
            fitted = "as above"
        rows.append({"parameter": r.parameter, "distribution": "the group above" if same_group else r.parameters,
                     "how fitted": fitted,
                     "mean": significant(r.mean, 4),
                     "95% interval": f"{significant(r.low_95, 4)} to {significant(r.high_95, 4)}",
                     "deterministic value": point})
    return pd.DataFrame(rows, columns=["parameter", "distribution", "how fitted", "mean", "95% interval",
                                       "deterministic value"])


def means_shown(table: pd.DataFrame, currency: str) -> pd.DataFrame:
    """Per method and strategy of the per-draw table: the mean discounted costs and QALYs over the
    draws, each to the decimal place of its MCSE over the draws (SD / sqrt(N), independent draws)."""
    groups = table.groupby(["method", "strategy"], sort=False)[["costs_discounted", "qalys_discounted"]]
    mean, sd, n = groups.mean(), groups.std(ddof=1), groups.size().to_numpy(float)
    rows = {"method": [method_words(str(m)) for m, _ in mean.index], "strategy": [s for _, s in mean.index]}
    for col, name in (("costs_discounted", f"costs ({currency})"), ("qalys_discounted", "QALYs")):
        with np.errstate(invalid="ignore", divide="ignore"):
            mcse = sd[col].to_numpy(float) / np.sqrt(n)
        rows[name] = estimate_text(mean[col], mcse)
        rows[f"{name} MCSE"] = estimate_text(mcse, mcse)
    return pd.DataFrame(rows)


def incremental_shown(incremental: pd.DataFrame, draws: int, currency: str) -> pd.DataFrame:
    """Per method and strategy: mean incremental costs and QALYs with their MCSE over the draws
    (SD / sqrt(N)) and SD (parameter uncertainty) at the mean's decimals, the ICER of the means in
    whole currency units, the quadrant."""
    n = max(int(draws), 1)
    rows = {"method": [method_words(str(m)) for m in incremental["method"]],
            "strategy": list(incremental["strategy"])}
    for col, sd_col, name in (("delta_costs", "sd_delta_costs", f"Δ costs ({currency})"),
                              ("delta_effects", "sd_delta_effects", "Δ QALYs")):
        mcse = incremental[sd_col].to_numpy(float) / np.sqrt(n)
        rows[name] = estimate_text(incremental[col], mcse)
        rows[f"{name} MCSE"] = estimate_text(mcse, mcse)
        d = np.where(decimals_from_mcse(mcse) >= 0, decimals_from_mcse(mcse), 0)
        rows[f"{name} SD"] = [format_fixed(float(x), int(k)) for x, k in zip(incremental[sd_col], d)]
    rows[f"ICER ({currency}/QALY)"] = [significant(x, 3) for x in incremental["icer"]]
    rows["quadrant"] = list(incremental["quadrant"])
    return pd.DataFrame(rows)


def ceac_shown(ceac: pd.DataFrame, frontier: pd.DataFrame, at: float) -> pd.DataFrame:
    """At one willingness to pay: each method's probability that each strategy is the most
    cost-effective (binomial MCSE), and the strategy with the highest expected net benefit."""
    c = ceac[np.isclose(ceac["wtp"], at)]
    f = frontier[np.isclose(frontier["wtp"], at)].set_index("method")["strategy"]
    return pd.DataFrame({"method": [method_words(str(m)) for m in c["method"]], "strategy": list(c["strategy"]),
                         "probability cost-effective": estimate_text(c["probability"], c["mcse"]),
                         "MCSE": estimate_text(c["mcse"], c["mcse"]),
                         "highest expected net benefit": ["yes" if f.get(m) == s else "" for m, s in
                                                          zip(c["method"], c["strategy"])]})


def evpi_shown(evpi: pd.DataFrame, method: str, points: np.ndarray, currency: str,
               population: pd.DataFrame | None = None) -> pd.DataFrame:
    """The reference method's EVPI per patient (with MCSE) at ``points``; with a population EVPI
    table (:func:`sim.uncertainty.population_evpi` of the same rows) its values too."""
    e = evpi[(evpi["method"] == method) & evpi["wtp"].isin(points)].sort_values("wtp")
    out = pd.DataFrame({f"willingness to pay ({currency}/QALY)": [format_fixed(float(w), 0) for w in e["wtp"]],
                        f"EVPI per patient ({currency})": estimate_text(e["evpi"], e["mcse"]),
                        "MCSE": estimate_text(e["mcse"], e["mcse"]),
                        "optimal strategy now": list(e["optimal_strategy"])})
    if population is not None:
        p = population.set_index("wtp").loc[e["wtp"].to_numpy()]
        out[f"population EVPI ({currency})"] = estimate_text(p["population_evpi"], p["population_evpi_mcse"])
        out["population MCSE"] = estimate_text(p["population_evpi_mcse"], p["population_evpi_mcse"])
    return out


def evpi_methods_shown(by_method: pd.DataFrame, at: float, currency: str) -> pd.DataFrame:
    """At one willingness to pay: each method's EVPI per patient and its difference from the
    reference's on the same draws (paired MCSE)."""
    b = by_method[np.isclose(by_method["wtp"], at)]
    return pd.DataFrame({"method": [method_words(str(m)) for m in b["method"]],
                         f"EVPI per patient ({currency})": estimate_text(b["evpi"], b["mcse"]),
                         "MCSE": estimate_text(b["mcse"], b["mcse"]),
                         "difference from reference": estimate_text(b["difference"], b["difference_mcse"]),
                         "difference MCSE": estimate_text(b["difference_mcse"], b["difference_mcse"])})


def ranges_shown(ranges: pd.DataFrame, currency: str) -> pd.DataFrame:
    """:func:`sim.uncertainty.differing_wtp_ranges` in words."""
    return pd.DataFrame({"method": [method_words(str(m)) for m in ranges["method"]],
                         "strategy": list(ranges["strategy"]),
                         f"from ({currency}/QALY)": [format_fixed(float(w), 0) for w in ranges["wtp_from"]],
                         f"to ({currency}/QALY)": [format_fixed(float(w), 0) for w in ranges["wtp_to"]],
                         "largest difference": estimate_text(ranges["largest_difference"], ranges["difference_mcse"]),
                         f"at ({currency}/QALY)": [format_fixed(float(w), 0) for w in ranges["at_wtp"]],
                         "MCSE": estimate_text(ranges["difference_mcse"], ranges["difference_mcse"])})


def noise_shown(noise: pd.DataFrame) -> pd.DataFrame:
    """Per strategy and outcome: the share of the variance over draws that is patient-level noise,
    with a first-order standard error from those of the noise and total variances (delta method,
    their covariance ignored, so it overstates the SE: the two rise together; from memory), and the
    patients per draw that would bring the share to the target."""
    share = noise["noise_share"].to_numpy(float)
    total = noise["total_variance"].to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        share_se = share * np.hypot(noise["total_variance_se"].to_numpy(float) / total,
                                    noise["noise_variance_se"].to_numpy(float)
                                    / noise["noise_variance"].to_numpy(float))
    return pd.DataFrame({"strategy": list(noise["strategy"]), "outcome": list(noise["outcome"]),
                         "draws": [format_fixed(int(x), 0) for x in noise["draws"]],
                         "patients per draw": [format_fixed(float(x), 0) for x in noise["patients"]],
                         "noise share": estimate_text(share, share_se),
                         "its SE": estimate_text(share_se, share_se),
                         "target share": [significant(x, 2) for x in noise["target_share"]],
                         "patients per draw for the target": [format_fixed(float(np.ceil(x)), 0) if np.isfinite(x)
                                                              else "∞" for x in noise["patients_for_target"]]})


def evppi_shown(evppi: pd.DataFrame, currency: str) -> pd.DataFrame:
    """EVPPI tables (:func:`sim.uncertainty.evppi`: ``wtp``, ``parameters``, ``evppi``, ``evppi_se``,
    ``evpi``, ``evpi_mcse``, ``clipped``) as shown text, with the EVPI of the same draws beside."""
    se = evppi["evppi_se"].to_numpy(float)
    return pd.DataFrame({"parameters": [str(v) for v in evppi["parameters"]],
                         f"willingness to pay ({currency}/QALY)": [format_fixed(float(w), 0) for w in evppi["wtp"]],
                         f"EVPPI per patient ({currency})": estimate_text(evppi["evppi"], se),
                         "SE": estimate_text(se, se),
                         f"EVPI ({currency})": estimate_text(evppi["evpi"], evppi["evpi_mcse"]),
                         "capped at EVPI": ["yes" if c else "" for c in evppi["clipped"]]})

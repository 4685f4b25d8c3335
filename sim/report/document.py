"""The report as one self-contained HTML file: inline SVG plots and diagram, HTML tables, one style
sheet, no script and no link to anything outside the file.

The markup is XHTML-compatible (every element closed, only XML's predefined entities), so an XML
parser reads it as well as a browser; the style sheet keeps tables and figures whole across printed
pages (``break-inside: avoid``), which the PDF (:mod:`sim.report.pdf`) relies on.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from html import escape

import pandas as pd

from ..io import Scenario
from ..psa.apply import describe_uncertainty  # not the package: its __init__ names the Dask runner
from .cautions import CAUTION
from .describe import describe_lines
from .diagram import model_svg
from .inputs import ReportInputs
from .numbers import significant
from .plots import TraceRequest, curve_figures, cycle_words, trace_occupancy
from .tables import decision_change_table, increment_table, outcome_table, safe_cycle_table, study_error_table
from .uncertainty import uncertainty_body

__all__ = ["report_html", "uncertainty_section", "default_traces", "STYLE"]

STYLE = """
@page { size: A4; margin: 16mm 14mm 18mm 14mm;
        @bottom-center { content: "HazardTrace report - page " counter(page) " of " counter(pages);
                         font-size: 8pt; color: #666; } }
body { font-family: "DejaVu Sans", Arial, sans-serif; font-size: 10pt; color: #1a1a1a; max-width: 62rem;
       margin: 1.5rem auto; padding: 0 1rem; line-height: 1.35; }
h1 { font-size: 17pt; margin-bottom: 0.2rem; } h2 { font-size: 13pt; margin-top: 1.6rem;
     border-bottom: 1px solid #ccc; break-after: avoid; page-break-after: avoid; }
h3 { font-size: 11pt; break-after: avoid; page-break-after: avoid; }
table { border-collapse: collapse; margin: 0.4rem 0 0.8rem; font-size: 8.5pt;
        break-inside: avoid; page-break-inside: avoid; }
th, td { border: 1px solid #c8c8c8; padding: 2px 6px; }
th { background: #eef2f6; text-align: left; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 0.6rem 0; break-inside: avoid; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; } figcaption { font-size: 8.5pt; color: #444; }
.caution { border: 2px solid #b03a2e; background: #fdf2f0; padding: 0.5rem 0.8rem; break-inside: avoid; }
.note { color: #555; font-size: 9pt; } .mono { font-family: "DejaVu Sans Mono", monospace; font-size: 8pt;
        word-break: break-all; }
ul.words li.sub { list-style: none; margin-left: 1.2rem; }
.keep { break-inside: avoid; page-break-inside: avoid; }
table.psa-inputs { width: 100%; break-inside: auto; page-break-inside: auto; }
table.psa-inputs tr { break-inside: avoid; page-break-inside: avoid; } table.psa-inputs td { overflow-wrap: anywhere; }
table.psa-inputs td:nth-child(4), table.psa-inputs td:nth-child(5) { white-space: nowrap; }
table.psa-inputs th:nth-child(1) { width: 21%; } table.psa-inputs th:nth-child(2) { width: 27%; }
table.psa-inputs th:nth-child(3) { width: 20%; }
"""


def _table(shown: pd.DataFrame, numeric: Sequence[str] = (), caption: str = "", cls: str = "") -> str:
    """An HTML table of the shown text (numbers right-aligned in ``numeric`` columns)."""
    head = "".join(f"<th>{escape(str(c))}</th>" for c in shown.columns)
    body = []
    for row in shown.itertuples(index=False):
        cells = "".join(f'<td class="num">{escape(str(v))}</td>' if c in numeric else f"<td>{escape(str(v))}</td>"
                        for c, v in zip(shown.columns, row))
        body.append(f"<tr>{cells}</tr>")
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    attr = f' class="{cls}"' if cls else ""
    return f"<table{attr}>{cap}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _keep(html: str) -> str:
    """A heading, its words and its table kept on one printed page."""
    return f'<div class="keep">{html}</div>'


def _section(title: str, body: str, ident: str) -> str:
    return f'<section id="{ident}"><h2>{escape(title)}</h2>{body}</section>'


def _p(text: str, cls: str = "") -> str:
    return f'<p{f" class={chr(34)}{cls}{chr(34)}" if cls else ""}>{escape(text)}</p>'


def default_traces(inputs: ReportInputs) -> list[TraceRequest]:
    """The cycle-based traces drawn when none are asked for: the per-transition and the
    matrix-exponential conversion at one year when the scenario's cycle lengths include it, else at
    the longest of them (where the approximations and the exact curve differ most visibly)."""
    lengths = list(inputs.scenario.run.cycle_lengths) or [1.0]
    h = 1.0 if any(abs(x - 1.0) < 1e-9 for x in lengths) else max(lengths)
    return [TraceRequest("per-transition", h), TraceRequest("matrix-exponential", h)]


def _figure(svg: str, caption: str) -> str:
    return f"<figure>{svg}<figcaption>{escape(caption)}</figcaption></figure>"


def uncertainty_section(psa_tables: Mapping[str, pd.DataFrame] | None, scenario: Scenario | None = None,
                        metadata: Mapping | None = None) -> str:
    """The results of a probabilistic analysis (:mod:`sim.report.uncertainty`): empty without tables.

    Parameters
    ----------
    psa_tables : tables by name, as :func:`sim.psa.psa_summaries` names them, with ``inputs``,
        ``population_evpi`` and ``evppi`` where computed; other names are shown as titled tables.
    scenario : the analysed scenario (currency, willingness to pay).
    metadata : the analysis's ``metadata.json`` (draws, patients, seed, parameters).
    """
    if not psa_tables:
        return ""
    body = uncertainty_body(psa_tables, scenario, metadata or {}, _table, _keep, _p, _figure)
    return _section("Uncertainty", body, "uncertainty")


def _scenario_section(inputs: ReportInputs) -> str:
    items = []
    for line in describe_lines(inputs.scenario, conversions=False)[2:]:
        sub = line.startswith("  ")
        items.append(f'<li{" class=" + chr(34) + "sub" + chr(34) if sub else ""}>{escape(line.strip())}</li>')
    for line in describe_uncertainty(inputs.scenario):  # the [[uncertainty]] entries, where there are any
        sub = line.startswith("  ")
        items.append(f'<li{" class=" + chr(34) + "sub" + chr(34) if sub else ""}>{escape(line.strip())}</li>')
    m = inputs.scenario.model
    v = m.valuation
    words = _p(f"Life years and QALYs are per patient, costs per patient in {v.currency}; discounted outcomes use "
               f"{100 * v.discount_costs:g}% a year for costs and {100 * v.discount_effects:g}% a year for effects "
               f"(continuously from entry, at ln(1 + rate)); the willingness to pay is {v.willingness_to_pay:,.0f} "
               f"{v.currency} per QALY.")
    diagram = f"<figure>{model_svg(m)}<figcaption>The model's states and transitions.</figcaption></figure>"
    return _section("The scenario in words", f'<ul class="words">{"".join(items)}</ul>{words}{diagram}', "scenario")


def _outcomes_section(inputs: ReportInputs) -> str:
    if inputs.outcomes is None:
        return ""
    sc = inputs.scenario
    nums, shown = outcome_table(inputs.outcomes, sc)
    numeric = [c for c in shown.columns if c in ("mean", "mcse", "exact", "z", "n")]
    exact = (" Exact: the Kolmogorov forward equations, averaged over entry ages and sexes; z = (mean − exact) / "
             "MCSE." if "exact" in nums.columns else f" {inputs.exact_note[:1].upper()}{inputs.exact_note[1:]}."
             if inputs.exact_note else "")
    body = _p("Simulated means per patient with their Monte Carlo standard errors (MCSE); each mean is shown to "
              "the second significant digit of its MCSE." + exact)
    body = _keep(body + _table(shown, numeric, cls="outcomes"))
    if inputs.increments is not None and len(inputs.increments):
        n2, s2 = increment_table(inputs.increments, sc)
        num2 = [c for c in s2.columns if c in ("value", "mcse", "mcse_unpaired", "exact")]
        body += _keep("<h3>Increments</h3>" + _p(
            f"Against {sc.model.strategy_names[0]!r}; MCSE from paired differences (the same simulated patients "
            "in every strategy: common random numbers), beside the unpaired MCSE for comparison. "
            "Net monetary benefit = willingness to pay × incremental QALYs − incremental costs (discounted).")
            + _table(s2, num2, cls="increments"))
    return _section("Outcomes", body, "outcomes")


def _curves_section(inputs: ReportInputs, traces: Sequence[TraceRequest]) -> str:
    if inputs.grid is None:
        return ""
    model = inputs.scenario.model
    t_end = float(inputs.grid[-1])
    drawn: dict = {}
    notes = []
    for strategy in model.strategy_names:
        for req in traces:
            table, note = trace_occupancy(model, strategy, req, t_end, str(inputs.scenario.run.tunnel_entry))
            if table is not None:
                drawn[(strategy, req)] = table
            elif note and note not in notes:
                notes.append(note)
    figs = curve_figures(model, inputs.survival, inputs.occupancy, inputs.exact_occupancy, drawn, t_end)
    body = _p("Probability of being alive and of being in each living state against years since entry. Past the "
              "earliest horizon each patient counts in the state they were in at their own horizon. Simulated: "
              "Kaplan-Meier and Aalen-Johansen estimates from the event log.")
    body += "".join(f"<figure>{svg}<figcaption>{escape(cap)}</figcaption></figure>" for cap, svg in figs)
    body += "".join(_p(n, "note") for n in notes)
    return _section("Survival and state occupancy", body, "curves")


def _study_section(inputs: ReportInputs) -> str:
    study = inputs.study
    if study is None or not len(study.table):
        return ""
    run = inputs.scenario.run
    tol = float(study.largest_cycle["tolerance"].iloc[0]) if len(study.largest_cycle) else float(run.tolerance)
    kind = str(study.largest_cycle["tolerance_kind"].iloc[0]) if len(study.largest_cycle) else "relative"
    first = str(study.table["strategy"].iloc[0])
    body = _p(f"Cycle-based cohort approximations of the same model against the {study.reference_kind} reference, "
              f"for every cycle length, rate-to-probability conversion and within-cycle correction. Errors are "
              f"relative to the reference, for {first!r} with the half-cycle correction.")
    body = _keep(body + _table(study_error_table(study), ["life-year error %", "QALY error % (discounted)",
                                                          "cost error % (discounted)"], cls="study-errors"))
    safe = safe_cycle_table(study, first)
    if len(safe):
        words = {"life_years": "life years", "qalys_discounted": "QALYs (disc.)", "costs_discounted": "costs (disc.)"}
        body += _keep("<h3>Safe cycle lengths</h3>" + _p(
            f"The largest cycle length tried such that it and every shorter one tried keep the error within "
            f"{significant(100 * tol if kind == 'relative' else tol, 3)}{'%' if kind == 'relative' else ''} "
            f"({kind}), for each outcome of {first!r}; \"none\": not even the shortest.")
            + _table(safe.rename(columns=words), cls="safe-cycles"))
    flips = decision_change_table(study)
    if len(flips):
        decisions = _p("Combinations whose decision (the sign of the net monetary benefit against the comparator) "
                       "differs from the reference's:") + _table(flips, ["net monetary benefit", "reference"],
                                                                  cls="decisions")
    elif study.decisions is not None and len(study.decisions):
        decisions = _p("No combination tried changes the decision.")
    else:
        decisions = _p("One strategy: no decision to change.")
    body += _keep("<h3>Decision changes</h3>" + decisions)
    if study.tunnel_entry is not None:
        body += _p(f"Tunnel states (time-in-state clocks): run.tunnel_entry = \"{study.tunnel_entry}\".", "note")
    body += "".join(_p(f"Note: {n}", "note") for n in study.notes)
    body += _p("Cycle lengths tried: " + ", ".join(cycle_words(float(h)) for h in sorted(set(study.table["cycle_length"])))
               + ".", "note")
    return _section("Discretization error of cycle-based approximations", body, "study")


def _conversions_section(inputs: ReportInputs) -> str:
    notes = list(inputs.scenario.conversions)
    if not notes:
        return _section("Conversions", _p("The program converted no input: every hazard was given as a rate or a law."),
                        "conversions")
    items = "".join(f"<li>{escape(n)}</li>" for n in notes)
    return _section("Conversions", _p("What the program converted when it read the scenario (risk to rate, life "
                                      "table q to m, fits):") + f"<ul>{items}</ul>", "conversions")


def _metadata_section(inputs: ReportInputs) -> str:
    m = inputs.metadata
    rows: list[tuple[str, str]] = [("made from", inputs.source)]

    def add(label: str, key: str, fmt=str) -> None:
        if m.get(key) is not None:
            rows.append((label, fmt(m[key])))

    add("HazardTrace version", "tool_version")
    add("seed", "seed")
    if m.get("draws") is not None:
        add("parameter draws", "draws", lambda n: f"{int(n):,}")
        add("patients per draw and strategy", "patients", lambda n: f"{int(n):,}")
    else:
        add("patients per strategy", "patients", lambda n: f"{int(n):,}")
    add("threads", "threads")
    add("patients per chunk", "chunk_size", lambda n: f"{int(n):,}")
    add("events simulated", "events", lambda n: f"{int(n):,}")
    add("run date (UTC)", "date_utc")
    add("run time", "run_seconds", lambda s: f"{significant(float(s), 3)} s")
    if isinstance(m.get("seconds"), dict) and m["seconds"]:
        rows.append(("time per stage", ", ".join(f"{k} {significant(float(v), 2)} s" for k, v in m["seconds"].items())))
    add("Python, numpy, pandas", "python", lambda v: f"{v}, {m.get('numpy', '?')}, {m.get('pandas', '?')}")
    add("scenario file", "scenario_file")
    add("scenario SHA-256", "scenario_sha256")
    for f in m.get("input_files") or []:
        rows.append((f"input file {f.get('key')}", f"{f.get('path')} — SHA-256 {f.get('sha256') or 'not readable'}"))
    add("event log SHA-256 (content)", "event_log_sha256")
    add("per-draw table SHA-256 (content)", "draws_table_sha256")
    add("patient table SHA-256 (content)", "patients_sha256")
    shown = pd.DataFrame(rows, columns=["item", "value"])
    body = _table(shown, cls="metadata")
    body += "".join(_p(n, "note") for n in inputs.notes)
    if m.get("event_log_sha256"):
        body += _p("Rerun with 'hazardtrace rerun RUN_DIR' to check that the event log is reproduced bit for bit.",
                   "note")
    return _section("Run", body, "run")


def report_html(inputs: ReportInputs, traces: Sequence[TraceRequest] | None = None,
                psa_tables: Mapping[str, pd.DataFrame] | None = None, title: str | None = None) -> str:
    """The whole report as an HTML string (see the module docstring).

    Parameters
    ----------
    inputs : what to show (:class:`ReportInputs`).
    traces : cycle-based traces to draw beside the simulated and exact curves (default
        :func:`default_traces`).
    psa_tables : results of a probabilistic analysis, for :func:`uncertainty_section`.
    title : the document's title (default: "HazardTrace report: <model name>").
    """
    m = inputs.scenario.model
    title = title or f"HazardTrace report: {m.name}"
    traces = list(traces) if traces is not None else default_traces(inputs)
    caution = f'<div class="caution"><strong>Caution.</strong> {escape(CAUTION)}</div>'
    when = inputs.metadata.get("date_utc")
    lead = _p(f"Made from {inputs.source}" + (f"; run on {when} (UTC)" if when else "") + ".", "note")
    sections = [_scenario_section(inputs), _outcomes_section(inputs), _curves_section(inputs, traces),
                _study_section(inputs),
                uncertainty_section(psa_tables, inputs.scenario, inputs.metadata), _conversions_section(inputs),
                _metadata_section(inputs), _section("Cautions", _p(CAUTION), "cautions")]
    return ("<!DOCTYPE html>\n"
            f'<html xmlns="http://www.w3.org/1999/xhtml" lang="en"><head><meta charset="utf-8"/>'
            f"<title>{escape(title)}</title><style>{STYLE}</style></head><body>"
            f"<h1>{escape(title)}</h1>{lead}{caution}{''.join(s for s in sections if s)}</body></html>\n")

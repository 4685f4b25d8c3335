"""Profiles behind the unmet figures of RESULTS.md, reproducible: where the engine's time goes.

    .venv/bin/python benchmarks/profile_engine.py            # full sizes; writes benchmarks/PROFILES.md
    .venv/bin/python benchmarks/profile_engine.py --quick    # small sizes, prints only (tests run this)

Sections (``--only``):

- ``engine``: line_profiler over the engine's hot functions (``sim.engine.histories._run_strategy``,
  ``sim.engine.histories._chunk_in`` (one chunk),
  ``sim.engine.tables.OutputTables.place_events``, ``sim.engine.histories._assemble``) for the
  reference workload, 1,000,000 patients, one thread; the lines taking >= 2% of a function's time,
  then the time grouped by kind of work (the compiled round loop, placing the events into the run's
  columns, building the frames), and the same for a run with the block forms switched off (the
  numpy path, same histories), whose calls show the parts of the round loop (draws, hazards,
  competing minimum, grouping).
- ``batches``: pyinstrument over 300 calls of ``simulate(1,000 patients)``.
- ``pipeline``: pyinstrument over ``sim.pipeline.run.run_scenario`` on the reference workload at 100,000
  patients (what the desktop window runs; the study included).

Profilers add their own overhead (line_profiler ~10-30% here), so the shares matter, not the totals.
"""

from __future__ import annotations

import argparse
import io
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from harness import machine  # noqa: E402
from workloads import reference_model  # noqa: E402

import sim.engine.histories as engine  # noqa: E402
import sim.engine.tables as tables  # noqa: E402

SECTIONS = ("engine", "batches", "pipeline")
OUTPUT = HERE / "PROFILES.md"

# engine source lines by kind of work: (kind, text that identifies the line)
_KINDS = (
    ("the compiled round loop (kernels.run_rounds: grouping, draws, block-form hazards, competing minimum)",
     ("kernels.run_rounds(",)),
    ("draws (counter-based generator, uniforms, log)", ("visit_units(", "np.log(e", "np.negative(e")),
    ("hazards (conditional times)", ("_latent_times(",)),
    ("competing minimum, moves and records (kernels.settle)", ("kernels.settle(",)),
    ("grouping by state", ("kernels.by_state(",)),
)


def _line_stats(lp) -> list[tuple[str, str, int, float]]:
    """(function, source line, hits, seconds) for every timed line."""
    stats = lp.get_stats()
    out = []
    for (filename, _first, name), timings in stats.timings.items():
        lines = Path(filename).read_text().splitlines()
        for lineno, hits, total in timings:
            out.append((name, lines[lineno - 1].strip(), hits, total * stats.unit))
    return out


def _profiled_run(model, n: int) -> tuple[list[tuple[str, str, int, float]], float]:
    """Line timings of one run (the engine's hot functions) and its time with the profiler."""
    from line_profiler import LineProfiler

    place = tables.OutputTables.place_events
    lp = LineProfiler(engine._run_strategy, engine._chunk_in, engine._assemble, place)
    saved = (engine._run_strategy, engine._chunk_in, engine._assemble)
    engine._run_strategy = lp(engine._run_strategy)
    engine._chunk_in = lp(engine._chunk_in)
    engine._assemble = lp(engine._assemble)
    tables.OutputTables.place_events = lp(place)
    try:
        t0 = time.perf_counter()
        engine.simulate(model, n, seed=1, workers=1)
        profiled = time.perf_counter() - t0
    finally:
        engine._run_strategy, engine._chunk_in, engine._assemble = saved
        tables.OutputTables.place_events = place
    return _line_stats(lp), profiled


def _by_function(rows) -> dict[str, float]:
    by_fn: dict[str, float] = {}
    for fn, _src, _hits, sec in rows:
        by_fn[fn] = by_fn.get(fn, 0.0) + sec
    return by_fn


def _kind_table(text: io.StringIO, rows, by_fn: dict[str, float]) -> None:
    """Time within ``_run_strategy`` (the round loop) grouped by kind of work (:data:`_KINDS`)."""
    total = by_fn.get("_run_strategy", 0.0)
    kinds: dict[str, float] = {}
    for _fn, src, _hits, sec in (r for r in rows if r[0] == "_run_strategy"):
        kind = next((k for k, marks in _KINDS if any(m in src for m in marks)), "round bookkeeping (selection, "
                    "occurrence counters, moves, censoring)")
        kinds[kind] = kinds.get(kind, 0.0) + sec
    text.write("| Work (inside the round loop, `_run_strategy`) | ms | share |\n|---|---|---|\n")
    for kind, sec in sorted(kinds.items(), key=lambda kv: -kv[1]):
        text.write(f"| {kind} | {sec * 1e3:.1f} | {sec / total:.0%} |\n")


def engine_section(quick: bool) -> str:
    n = 50_000 if quick else 1_000_000
    model = reference_model()
    engine.simulate(model, n, seed=1, workers=1)  # warm-up (the first large run pays fresh pages)
    plain = []
    for _ in range(3):
        t0 = time.perf_counter()
        engine.simulate(model, n, seed=1, workers=1)
        plain.append(time.perf_counter() - t0)
    rows, profiled = _profiled_run(model, n)
    by_fn = _by_function(rows)
    text = io.StringIO()
    text.write(f"Reference workload, {n:,} patients, 1 thread: {sorted(plain)[1] * 1e3:.0f} ms without the profiler "
               f"(median of 3), {profiled * 1e3:.0f} ms with it.\n\n")
    _kind_table(text, rows, by_fn)
    attr = sum(sec for fn, src, _h, sec in rows if fn == "_chunk_in" and "range_units(" in src)
    text.write(f"\nOutside the loop: patient attributes' draws {attr * 1e3:.1f} ms; placing the events into the "
               f"run's columns, in the chunks (`OutputTables.place_events`) {by_fn.get('OutputTables.place_events', 0.0) * 1e3:.1f} "
               f"ms; building the frames (`_assemble`) {by_fn.get('_assemble', 0.0) * 1e3:.1f} ms.\n\n")
    text.write("Lines taking >= 2% of their function's time:\n\n")
    text.write("| function | line | hits | ms | share of function |\n|---|---|---|---|---|\n")
    for fn, src, hits, sec in sorted(rows, key=lambda r: (r[0], -r[3])):
        if by_fn[fn] > 0 and sec >= 0.02 * by_fn[fn]:
            cell = src.replace("|", "\\|")[:110]
            text.write(f"| `{fn}` | `{cell}` | {hits:,} | {sec * 1e3:.1f} | {sec / by_fn[fn]:.0%} |\n")
    # the compiled round loop is one call to line_profiler: the same work on the numpy path (the block
    # forms switched off: the same histories, every step a numpy or kernel call of its own) shows its parts
    saved_loops = engine.numpy_loops
    engine.numpy_loops = lambda: None
    try:
        engine.simulate(model, n, seed=1, workers=1)
        rows, profiled = _profiled_run(model, n)
    finally:
        engine.numpy_loops = saved_loops
    text.write(f"\nThe same run with the block forms switched off (`sim.engine.histories.numpy_loops` -> None: "
               f"the numpy path, the same histories, each step a call of its own; {profiled * 1e3:.0f} ms with the "
               f"profiler), which shows the parts of the compiled round loop (there `kernels.run_rounds` only groups the "
               f"patients by state):\n\n")
    _kind_table(text, rows, _by_function(rows))
    return text.getvalue()


def _pyinstrument(fn, label: str) -> str:
    from pyinstrument import Profiler

    fn()  # warm-up
    p = Profiler(interval=0.0005)
    p.start()
    fn()
    p.stop()
    tree = p.output_text(unicode=False, color=False, show_all=False)
    return f"{label}\n\n```\n{tree.strip()}\n```\n"


def batches_section(quick: bool) -> str:
    model = reference_model()
    calls = 30 if quick else 300

    def go() -> None:
        for i in range(calls):
            engine.simulate(model, 1000, seed=i)
    return _pyinstrument(go, f"{calls} calls of `simulate(model, 1000, seed=i)` (pyinstrument, 0.5 ms sampling):")


def pipeline_section(quick: bool) -> str:
    from sim.pipeline.run import run_scenario
    from sim.io.scenario import RunSettings, document_from_model, parse_scenario, scenario_text

    n = 10_000 if quick else 100_000
    text = scenario_text(document_from_model(reference_model(), RunSettings(patients=n, seed=1, workers=2)),
                         header="Benchmark reference workload (invented numbers).")
    scenario = parse_scenario(text)
    return _pyinstrument(lambda: run_scenario(scenario),
                         f"`run_scenario` on the reference workload, {n:,} patients, 2 threads (pyinstrument; "
                         "time in worker threads shows as waiting in the calling thread):")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes; prints only")
    ap.add_argument("--only", nargs="+", choices=SECTIONS)
    ap.add_argument("--output", type=Path, help=f"where to write (default: {OUTPUT.name} in full mode)")
    args = ap.parse_args(sys.argv[1:] if argv is None else argv)
    info = machine()
    parts = [f"# HazardTrace profiles\n\nWritten by `benchmarks/profile_engine.py` ({'quick' if args.quick else 'full'} "
             f"mode) on {info['date (UTC)']} UTC: {info['cores']}, {info['CPU']}, numpy {info['numpy']}, "
             f"line_profiler {info['line_profiler']}, pyinstrument {info['pyinstrument']}. See the notes in "
             "RESULTS.md for what they show.\n"]
    for name in SECTIONS:
        if args.only and name not in args.only:
            continue
        print(f"profiling {name}...", flush=True)
        parts.append(f"\n## {name}\n\n" + globals()[f"{name}_section"](args.quick))
    text = "".join(parts)
    print(text)
    out = args.output or (None if args.quick else OUTPUT)
    if out is not None:
        out.write_text(text, encoding="utf-8")
        print(f"written to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""The engine's compiled block path (sim.hazards.numpy_loops, sim.hazards.blocks and
kernels.state_round) gives the bits of the numpy code it replaces: numpy's own loops are called,
each family's block form equals the hazard's numpy conditional time where it reports success, and
the engine's tables are identical with the block path switched off."""

import math

import numpy as np
import pytest

from sim.engine import histories, simulate
from sim.hazards import Exponential, Gompertz, Weibull, numpy_loops
from sim.hazards.blocks import block_form, exit_block
from sim.hazards.proportional import ProportionalHazards
from sim.model.multistate import BackgroundMortality, Clock, Horizon, Model, State, Transition
from sim.model.population import Population, UniformAge


def test_numpy_loops_are_found_and_give_the_ufuncs_bits():
    fns = numpy_loops.loops()
    assert fns is not None, "numpy's float64 loops were not found or failed the self-check"
    gen = np.random.default_rng(7)
    x = np.concatenate([gen.normal(0.0, 40.0, 10_001), [0.0, -0.0, np.inf, -np.inf, np.nan, 1e-310]])
    with np.errstate(all="ignore"):
        for which, uf in enumerate((np.log, np.exp, np.log1p, np.expm1)):
            got = np.empty_like(x)
            numpy_loops._apply(fns, which, x, got, 333, 1)
            np.testing.assert_array_equal(got.view(np.uint64), uf(x).view(np.uint64))


def test_a_loop_with_other_bits_is_rejected(monkeypatch):
    real = numpy_loops._address
    monkeypatch.setattr(numpy_loops, "_address", lambda uf: real(np.exp if uf is np.log else uf))
    numpy_loops.loops.cache_clear()
    try:
        assert numpy_loops.loops() is None
    finally:
        monkeypatch.undo()
        numpy_loops.loops.cache_clear()
    assert numpy_loops.loops() is not None


def test_the_environment_switch_turns_the_loops_off(monkeypatch):
    monkeypatch.setenv("HAZARDTRACE_NUMPY_LOOPS", "0")
    numpy_loops.loops.cache_clear()
    try:
        assert numpy_loops.loops() is None
    finally:
        monkeypatch.delenv("HAZARDTRACE_NUMPY_LOOPS")
        numpy_loops.loops.cache_clear()


def _block(h, x, draws, j, x_zero=False, lanes=None):
    """exit_block over the rows of ``draws`` in blocks of ``lanes`` (as the engine calls it)."""
    fns = numpy_loops.loops()
    family, p0, p1, p2 = block_form(h)
    n = draws.shape[0]
    lanes = lanes or n
    out, tmp, ok = np.empty(n), np.empty((3, lanes)), True
    for a in range(0, n, lanes):
        b = min(a + lanes, n)
        ok &= exit_block(fns, family, p0, p1, p2, x[a:b], x_zero, draws[a:b], j, out[a:b], tmp)
    return out, ok


def _draws(seed, n=20_000):
    gen = np.random.default_rng(seed)
    return gen.exponential(size=(n, 3))


HAZARDS = [Exponential(0.3), Exponential(1e-300), Weibull(1.3, 12.0), Weibull(0.4, 0.5), Weibull(7.0, 80.0),
           Gompertz(5e-4, 0.09), Gompertz(3.0, 1e-9), Gompertz(0.02, 1.5)]


@pytest.mark.parametrize("h", HAZARDS, ids=repr)
@pytest.mark.parametrize("clock", ["zero", "positive", "mixed"])
def test_block_form_equals_the_numpy_conditional_time_bit_for_bit(h, clock):
    draws = _draws(1)
    gen = np.random.default_rng(2)
    x = {"zero": np.zeros(draws.shape[0]), "positive": gen.uniform(1e-9, 100.0, draws.shape[0]),
         "mixed": np.where(gen.random(draws.shape[0]) < 0.3, 0.0, gen.uniform(0.0, 100.0, draws.shape[0]))}[clock]
    for j in range(3):
        for lanes in (None, 7, 512):
            got, ok = _block(h, x, draws, j, x_zero=clock == "zero", lanes=lanes)
            assert ok
            with np.errstate(all="ignore"):
                want = h._conditional_time(x, draws[:, j])
            np.testing.assert_array_equal(got.view(np.uint64), want.view(np.uint64))


@pytest.mark.parametrize("h,x_edge", [(Gompertz(1e-5, 30.0), 60.0), (Gompertz(5e-4, 0.09), 0.0),
                                      (Weibull(0.01, 1e300), 1e308)], ids=repr)
def test_block_reports_where_the_numpy_code_takes_its_general_form(h, x_edge):
    """A Gompertz value outside the short form's range (a huge hazard; a zero draw) or a Weibull time
    that overflows: the block says so (the engine then calls the numpy code)."""
    draws = _draws(3, 100)
    x = np.full(100, 40.0)
    if isinstance(h, Gompertz) and x_edge == 0.0:
        draws[17, 0] = 0.0  # e g / B = 0: below the short form's range
    else:
        x[17] = x_edge
    _, ok = _block(h, x, draws, 0)
    assert not ok


def test_wrapped_and_other_hazards_have_no_block_form():
    assert block_form(ProportionalHazards(Weibull(1.3, 12.0), 0.7)) is None
    assert block_form(Gompertz(1e-3, -0.05)) is None  # improper: the numpy code's own form
    assert block_form(Exponential(0.0)) is None
    assert block_form(Weibull(1.3, 12.0))[1:] == (1.3, math.log(12.0), 0.0)


def _model(onset, background):
    return Model(
        states=(State("well"), State("ill"), State("dead", absorbing=True)),
        transitions=(Transition("onset", "well", "ill", onset, Clock.ENTRY),
                     Transition("relapse-free", "ill", "well", Exponential(0.4), Clock.STATE),
                     Transition("illness death", "ill", "dead", Weibull(0.8, 9.0), Clock.STATE)),
        background=BackgroundMortality("dead", {"all": background}, Clock.AGE),
        population=Population(UniformAge(40.0, 70.0), "well"),
        horizon=Horizon(60.0),
        name="block path check (invented numbers)")


@pytest.mark.parametrize("onset,background", [
    (Weibull(1.2, 15.0), Gompertz(2.7e-5, 0.09)),  # every state on the block path
    (Weibull(1.2, 15.0), Gompertz(1e-5, 30.0)),  # the Gompertz short form fails: the numpy fallback
    (ProportionalHazards(Weibull(1.2, 15.0), 0.8), Gompertz(2.7e-5, 0.09)),  # "well" on the numpy path
])
def test_engine_tables_are_identical_with_the_block_path_switched_off(monkeypatch, onset, background):
    model = _model(onset, background)
    fast = simulate(model, 6_000, seed=11, chunk_size=2_500, workers=2)
    monkeypatch.setattr(histories, "numpy_loops", lambda: None)
    slow = simulate(model, 6_000, seed=11, chunk_size=2_500, workers=2)
    assert len(fast.events) >= 6_000  # every patient moves at least once
    assert fast.events.equals(slow.events)
    assert fast.patients.equals(slow.patients)


@pytest.mark.parametrize("module,files", [
    ("sim.hazards.blocks", ("sim/hazards/_fused.py", "sim/hazards/numpy_loops.py")),
    ("sim.engine.kernels", ("sim/hazards/blocks.py", "sim/hazards/_fused.py", "sim/hazards/numpy_loops.py")),
])
def test_compiled_code_records_the_files_it_calls(module, files):
    """numba's on-disk cache is keyed on a function's own source file only: a module whose cached
    kernels call compiled code in other files records their hash, so that editing them changes the
    module and its cached kernels are compiled again (update the constant when this fails)."""
    import hashlib
    import importlib
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    digest = hashlib.sha256()
    for f in files:
        digest.update((root / f).read_bytes())
    assert importlib.import_module(module).COMPILED_DEPENDENCIES == digest.hexdigest()[:16], (
        f"{module}.COMPILED_DEPENDENCIES must be {digest.hexdigest()[:16]!r} (the files it calls changed)")

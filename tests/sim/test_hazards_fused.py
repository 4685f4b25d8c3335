"""The fused arithmetic kernels (sim.hazards._fused) give the bits of the numpy expressions they
replace, on ordinary and extreme inputs (the fallback to the numpy path included)."""

import math

import numpy as np
import pytest

from sim.hazards import Gompertz, Weibull
from sim.hazards._fused import fusable
from sim.hazards.gompertz import _gompertz_time, gompertz_times
from sim.hazards.shape_scale import weibull_times


def _inputs(seed: int, n: int = 20_000) -> tuple[np.ndarray, np.ndarray]:
    gen = np.random.default_rng(seed)
    x = np.concatenate([gen.uniform(0, 110, n), [0.0, 1e-300, 1e6, 1e300, 5e307]])
    e = np.concatenate([gen.exponential(size=n), [0.0, 5e-324, 1e-300, 1e300, np.inf]])
    return x, e


@pytest.mark.parametrize("rate,shape", [(5e-4, 0.09), (1e-300, 0.09), (3.0, 1e-9), (1e-5, 30.0), (0.02, 5e-324)])
def test_gompertz_fused_time_equals_the_numpy_form_bit_for_bit(rate, shape):
    x, e = _inputs(1)
    log_rate, g, log_g = Gompertz(rate, shape)._lane_params()
    assert fusable((log_rate, g, log_g), (x, e))
    with np.errstate(all="ignore"):
        fused = gompertz_times(log_rate, g, log_g, x, e)
        numpy_form = _gompertz_time(log_rate + g * x, g, log_g, e)
    np.testing.assert_array_equal(fused, numpy_form)


def test_gompertz_fused_time_on_a_strided_draw_column():
    x, e = _inputs(2)
    draws = np.stack([e, e[::-1]], axis=1)  # the engine passes a column of a (patients, exits) block
    log_rate, g, log_g = Gompertz(5e-4, 0.09)._lane_params()
    with np.errstate(all="ignore"):
        np.testing.assert_array_equal(gompertz_times(log_rate, g, log_g, x, draws[:, 1]),
                                      _gompertz_time(log_rate + g * x, g, log_g, draws[:, 1].copy()))


@pytest.mark.parametrize("shape,scale", [(1.3, 12.0), (0.4, 0.5), (7.0, 80.0), (1e-3, 1e5)])
def test_weibull_fused_first_visit_time_equals_the_numpy_form_bit_for_bit(shape, scale):
    _, e = _inputs(3)
    x = np.zeros_like(e)
    log_lam = math.log(scale)
    with np.errstate(all="ignore"):
        np.testing.assert_array_equal(weibull_times(shape, log_lam, x, e), np.exp(log_lam + np.log(e) / shape))
        np.testing.assert_array_equal(Weibull(shape, scale)._conditional_time(x, e),
                                      np.exp(log_lam + np.log(e) / shape))


def test_per_lane_parameters_are_not_fused():
    x, e = _inputs(4, 10)
    assert not fusable((np.full(x.size, 0.1), 0.09, math.log(0.09)), (x, e))
    assert not fusable((0.1, 0.09, math.log(0.09)), (x.reshape(-1, 1), e.reshape(-1, 1)))
    assert not fusable((0.1, 1, 0.0), (x, e))  # an int: numpy's type promotion, not the kernels'


@pytest.mark.parametrize("shape,scale", [(1.3, 12.0), (0.4, 0.5), (7.0, 80.0), (1e-3, 1e5), (0.999999999999999, 1.0),
                                         (300.0, 1e-300)])
def test_weibull_fused_time_on_running_clocks_equals_the_numpy_form_bit_for_bit(shape, scale):
    x, e = _inputs(5)
    log_lam = math.log(scale)
    assert fusable((shape, log_lam), (x, e))
    with np.errstate(all="ignore"):
        fused = weibull_times(shape, log_lam, x, e)
        numpy_form = weibull_times(np.float64(shape), np.float64(log_lam), x, e)  # numpy scalars: not fused
    assert not fusable((np.float64(shape), np.float64(log_lam)), (x, e))
    np.testing.assert_array_equal(fused, numpy_form)

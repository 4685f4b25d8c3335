"""The hazard interface: hazard, cumulative hazard, survival and exact sampling on a clock in years.

Every family describes a non-negative hazard :math:`h(t)` on a clock :math:`t \\ge 0` measured in
**years**, with cumulative hazard :math:`H(t) = \\int_0^t h(s)\\,ds` and survival
:math:`S(t) = \\exp(-H(t))` (docs/methods.md, 'Hazards and survival'). All methods are vectorised: arguments broadcast
with numpy rules and results are float64 ndarrays (0-d for scalar input).

Sampling uses inverse cumulative hazard sampling (Bender, Augustin & Blettner 2005): with
:math:`E \\sim \\mathrm{Exp}(1)` the event time is :math:`T = H^{-1}(E)`, and given the clock already
reads :math:`x` (left truncation, e.g. current age) :math:`T = H^{-1}(H(x) + E) - x`.
:meth:`Hazard.conditional_time` evaluates the latter in a form free of the cancellation in
``H(x) + E`` and in ``... - x`` (closed forms per family; safeguarded Newton iterations where no
closed form exists).

Conventions
-----------
* Inverse cumulative hazard: :math:`H^{-1}(y) = \\inf\\{t \\ge 0 : H(t) > y\\}`, with
  :math:`\\inf \\emptyset = +\\infty`. So :math:`H^{-1}(y) = +\\infty` exactly when
  :math:`y \\ge H(\\infty)` (improper families, e.g. Gompertz with a negative shape, or a zero
  hazard), and a stretch of zero hazard is skipped rather than stopped at.
* Conditional time: :math:`\\inf\\{t \\ge 0 : H(x + t) - H(x) > e\\}`. It is ``0`` for ``e = 0``
  whenever the hazard is positive just after ``x`` and ``+inf`` when the event never happens. It is
  never NaN and never negative.
* Proportional hazards: ``h.scaled(hr)`` has cumulative hazard ``hr * H``, hence
  ``conditional_time(x, e / hr)`` of the base (Bender et al. 2005).
* Parameters are checked once, at construction, and raise :class:`HazardParameterError` naming the
  family, the parameter, the value received and the rule (as a :class:`sim.problems.Problem`).

The families live in their own modules (:mod:`.exponential`, :mod:`.shape_scale`, :mod:`.gamma`,
:mod:`.gompertz`, :mod:`.lognormal`, :mod:`.piecewise`, :mod:`.proportional`); :mod:`.registry`
maps family names to classes.

References
----------
.. [1] Bender R, Augustin T, Blettner M. Generating survival times to simulate Cox proportional
   hazards models. Stat Med 2005;24(11):1713-1723.
.. [2] Crowther MJ, Lambert PC. Simulating biologically plausible complex survival data.
   Stat Med 2013;32(23):4118-4134.
"""

from __future__ import annotations

import abc
import math
import numbers
from collections.abc import Iterable, Mapping
from typing import Any, ClassVar

import numpy as np
from numpy.typing import ArrayLike

from ..problems import NO_VALUE, KeyPath, Problem, ValidationError, format_key
from ._lane_kernels import WholeHazard, invert_and_polish
from ._numerics import FloatArray, _out
from .dimensions import Dimension

__all__ = ["KERNEL_ERRSTATE", "Hazard", "HazardParameterError"]


# --------------------------------------------------------------------------------------------
# Parameter errors and checks
# --------------------------------------------------------------------------------------------

class HazardParameterError(ValidationError):
    """A hazard family received a parameter outside its domain, or an unknown family/parameter.

    A :class:`sim.problems.ValidationError` (hence a ``ValueError``): :attr:`problems` hold the
    parameter's key path (``("shape",)``, ``("breaks", 2)``), the value received and the rule. The
    message names the family too (``"weibull: shape must be > 0 and finite, got -1.0"``).
    """

    def __init__(self, path: KeyPath | str = (), rule: str = "", value: Any = NO_VALUE, *,
                 problems: Iterable[Problem] | None = None, message: str | None = None) -> None:
        self._text = message
        super().__init__(path, rule, value, problems=problems)

    def _message(self) -> str:
        return self._text if self._text is not None else super()._message()

    def __reduce__(self):  # picklable with its message (process and Dask executors)
        return (_rebuild, (type(self), self.problems, self._text))


def _rebuild(cls: type, problems: tuple[Problem, ...], text: str | None) -> HazardParameterError:
    return cls(problems=problems, message=text)


def _invalid(family: str, path: KeyPath, rule: str, value: Any, message: str | None = None
             ) -> HazardParameterError:
    """The error for parameter ``path`` of ``family``; the message defaults to
    ``"<family>: <key> <rule>, got <value>"``."""
    if message is None:
        message = f"{family}: {format_key(path)} {rule}, got {value!r}"
    return HazardParameterError(path, rule, value, message=message)


_RULES = {
    "positive": ("> 0 and finite", lambda v: v > 0.0 and math.isfinite(v)),
    "nonnegative": (">= 0 and finite", lambda v: v >= 0.0 and math.isfinite(v)),
    "finite": ("finite", math.isfinite),
}


def _param(family: str, name: str | KeyPath, value: Any, rule: str) -> float:
    """Return ``value`` as a float after checking it against ``rule`` (a key of ``_RULES``).

    ``name`` is the parameter's name or key path (``("breaks", 2)`` for an element of a sequence).
    """
    path = (name,) if isinstance(name, str) else tuple(name)
    text, ok = _RULES[rule]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise _invalid(family, path, f"must be a real number ({text})", value)
    v = float(value)
    if not ok(v):
        raise _invalid(family, path, f"must be {text}", v)
    return v


def _seq(family: str, name: str, value: Any) -> tuple[Any, ...]:
    """``value`` as a tuple, after checking it is a 1-D sequence (not a string)."""
    if isinstance(value, (str, bytes)) or np.ndim(value) != 1:
        raise _invalid(family, (name,), "must be a 1-D sequence of numbers", value)
    return tuple(np.asarray(value, dtype=object).tolist())


def _nonnegative(method: str, name: str, a: ArrayLike, *, finite: bool = False) -> FloatArray:
    """Convert ``a`` to a float64 array and check ``a >= 0`` (and finite if asked); NaN is rejected."""
    arr = np.asarray(a, dtype=np.float64)
    ok = (arr >= 0.0) & (arr < np.inf) if finite else arr >= 0.0
    if not np.all(ok):
        bad = arr[~ok].flat[0]
        rule = "finite and >= 0" if finite else ">= 0 (inf allowed, NaN not)"
        raise ValueError(f"{method}: {name} must be {rule}, got {float(bad)!r}")
    return arr


# --------------------------------------------------------------------------------------------
# Base class
# --------------------------------------------------------------------------------------------


KERNEL_ERRSTATE = {"divide": "ignore", "over": "ignore", "under": "ignore"}
"""``np.errstate`` settings under which the public methods run the private kernels."""


class Hazard(abc.ABC):
    """Abstract hazard on a clock in years.

    Subclasses are frozen dataclasses whose fields are the named parameters. They implement the
    private ``_hazard``, ``_cumhazard`` and ``_inv_cumhazard`` (receiving validated float64 arrays)
    and the :attr:`cumhazard_limit` property; families with a closed-form conditional time override
    ``_conditional_time``. The public methods validate the arguments, silence the floating-point
    warnings that are part of the intended arithmetic (overflow to ``inf``, ``log(0) = -inf``) and
    return float64 ndarrays.

    Inside the package, hot loops (the engine's draws, the forward equations' right-hand side, the
    cohort traces' cycle rates) call the private kernels directly on float64 arrays that are valid by
    construction (clocks finite or +inf and >= 0), under :data:`KERNEL_ERRSTATE`: the values are
    those of the public methods, without their per-call checks and copies.
    """

    family: ClassVar[str]
    #: the dimension of each constructor parameter (time, rate, log-time, dimensionless), in order;
    #: drives unit conversion in the scenario reader, writer and editors (:mod:`.dimensions`)
    dimensions: ClassVar[Mapping[str, Dimension]]

    # ---- public API -----------------------------------------------------------------------
    def hazard(self, t: ArrayLike) -> FloatArray:
        """Hazard :math:`h(t)` for ``t >= 0`` (``+inf`` allowed); may be ``+inf`` at ``t = 0``."""
        t = _nonnegative(f"{self.family}.hazard", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._hazard(t))

    def cumhazard(self, t: ArrayLike) -> FloatArray:
        """Cumulative hazard :math:`H(t)`; ``H(inf)`` equals :attr:`cumhazard_limit`."""
        t = _nonnegative(f"{self.family}.cumhazard", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._cumhazard(t))

    def sf(self, t: ArrayLike) -> FloatArray:
        """Survival function :math:`S(t) = \\exp(-H(t))`."""
        t = _nonnegative(f"{self.family}.sf", "t", t)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(np.exp(-self._cumhazard(t)))

    def inv_cumhazard(self, y: ArrayLike) -> FloatArray:
        """Inverse cumulative hazard :math:`H^{-1}(y) = \\inf\\{t : H(t) > y\\}` for ``y >= 0``.

        ``+inf`` where ``y >= H(inf)`` (improper families or a zero hazard).
        """
        y = _nonnegative(f"{self.family}.inv_cumhazard", "y", y)
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._inv_cumhazard(y))

    def conditional_time(self, x: ArrayLike, e: ArrayLike) -> FloatArray:
        """Time to the event given the clock reads ``x`` and a standard exponential draw ``e``.

        Parameters
        ----------
        x : array_like
            Current clock value(s), finite and ``>= 0``.
        e : array_like
            Standard exponential draw(s), ``>= 0`` (``+inf`` gives ``+inf``).

        Returns
        -------
        ndarray
            :math:`T = H^{-1}(H(x) + e) - x` in the broadcast shape of ``x`` and ``e``; ``>= 0``,
            ``+inf`` where the event never happens, never NaN.

        Notes
        -----
        Left-truncated inverse cumulative hazard sampling (docs/methods.md, 'Hazards and survival'; Bender et al.
        2005). Each family evaluates it without forming ``H(x) + e`` or subtracting ``x`` where
        that would cancel.
        """
        x = _nonnegative(f"{self.family}.conditional_time", "x", x, finite=True)
        e = _nonnegative(f"{self.family}.conditional_time", "e", e)
        x, e = np.broadcast_arrays(x, e)
        for a in (x, e):  # views that are only read; saying so spares compiled kernels numpy's warning
            a.flags.writeable = False
        with np.errstate(**KERNEL_ERRSTATE):
            return _out(self._conditional_time(x, e))

    def rvs(self, size: int | tuple[int, ...], rng: np.random.Generator) -> FloatArray:
        """Event times from clock 0: ``inv_cumhazard(E)`` with ``E`` standard exponential from ``rng``."""
        return self.inv_cumhazard(rng.standard_exponential(size))

    def scaled(self, hr: float) -> Hazard:
        """Proportional-hazards version with cumulative hazard ``hr * H``.

        Parameters
        ----------
        hr : float
            Hazard ratio, ``>= 0`` and finite. ``hr = 1`` returns ``self``; ``hr = 0`` gives a
            hazard whose event never happens.

        Returns
        -------
        Hazard
            A :class:`ProportionalHazards` wrapping ``self`` (or ``self`` when ``hr == 1``).
        """
        from .proportional import ProportionalHazards  # deferred: it is a subclass of Hazard

        hr = _param(ProportionalHazards.family, "hr", hr, "nonnegative")
        if hr == 1.0:
            return self
        return ProportionalHazards(self, hr)

    @property
    @abc.abstractmethod
    def cumhazard_limit(self) -> float:
        """:math:`H(\\infty)`: ``inf`` for proper families, finite when the event may never happen."""

    @property
    def never_probability(self) -> float:
        """Probability that the event never happens from clock 0: :math:`\\exp(-H(\\infty))`."""
        return math.exp(-self.cumhazard_limit)

    @abc.abstractmethod
    def params(self) -> dict[str, Any]:
        """Named parameters (floats; tuples of floats for :class:`PiecewiseConstant`)."""

    # ---- family implementations ------------------------------------------------------------
    @abc.abstractmethod
    def _hazard(self, t: FloatArray) -> FloatArray: ...

    @abc.abstractmethod
    def _cumhazard(self, t: FloatArray) -> FloatArray: ...

    @abc.abstractmethod
    def _inv_cumhazard(self, y: FloatArray) -> FloatArray: ...

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        """Default for smooth families with ``h > 0`` on ``(0, inf)``: invert, then polish
        (:func:`~sim.hazards._lane_kernels.invert_and_polish`: ``T0 = H^{-1}(H(x) + e) - x``, then
        Newton on ``int_x^{x+T} h(s) ds = e`` by Gauss-Legendre where ``T0`` loses relative
        accuracy; Crowther & Lambert 2013)."""
        return invert_and_polish(WholeHazard(self), x, e)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray | None:
        """Conditional time under the cumulative hazard ``hr * H`` for 1-D lanes where ``e / hr``
        overflows although ``e`` is finite (a tiny hazard ratio), or ``None`` where the family has
        no form for it (:class:`ProportionalHazards` then keeps ``+inf``). Families whose time
        can stay finite there override it."""
        return None

    #: whether the family defines :meth:`_log_cumhazard_lt` and :meth:`_log_hazard_lt`
    _log_forms: ClassVar[bool] = False

    def _log_cumhazard_lt(self, lt: FloatArray) -> FloatArray:
        """:math:`\\log H` at :math:`t = e^{lt}` (any finite ``lt``), accurate where ``H``
        underflows, for families with :attr:`_log_forms`. With :meth:`_log_hazard_lt` it lets
        :class:`ProportionalHazards` solve for the time where ``e / hr`` underflows (a huge hazard
        ratio; :mod:`._log_space`)."""
        raise NotImplementedError

    def _log_hazard_lt(self, lt: FloatArray) -> FloatArray:
        """:math:`\\log h` at :math:`t = e^{lt}`, for families with :attr:`_log_forms`."""
        raise NotImplementedError

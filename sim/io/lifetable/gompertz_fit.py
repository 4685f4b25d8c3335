"""Gompertz and Gompertz-Makeham fits to a life table's band rates (Poisson maximum likelihood or
weighted least squares on log rates; Tai & Noymer 2018).

The fitted band rate is the band average of the hazard, :math:`\\mu_i = \\frac{1}{n_i}\\int_{x_i}^{x_i + n_i}
h(s)\\,ds`, which is what the constant-force rate :math:`-\\ln(1 - q_i)/n_i` measures, so a table
generated from the law itself is fitted exactly for any band widths. See :func:`fit_gompertz`.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize

from ...hazards import Gompertz, GompertzMakeham
from .errors import LifeTableError
from .table import FloatArray, LifeTable, _fmt, _num

__all__ = ["NOMINAL_EXPOSURE", "GompertzFit", "fit_gompertz"]

NOMINAL_EXPOSURE: float = 1e5
"""Person-years per year of band width assumed by :func:`fit_gompertz` when no exposure is given."""

_FIT_METHODS = ("poisson", "wls")


@dataclass(frozen=True)
class GompertzFit:
    """Result of :func:`fit_gompertz`.

    Attributes
    ----------
    b, g, c : float
        :math:`h(a) = c + b e^{g a}` per year on attained age ``a`` in years; ``c = 0`` unless
        ``makeham``.
    makeham : bool
        Whether the Makeham constant was fitted.
    method : {"poisson", "wls"}
        Estimation method.
    sex : str
        The table column fitted.
    age_range : tuple of float
        The requested ``(low, high)``; bands wholly inside it were used.
    band_starts, band_widths : tuple of float
        The bands used (years).
    observed_rates : tuple of float
        The table's constant-force band rates (:meth:`LifeTable.band_rates`).
    fitted_rates : tuple of float
        The fitted band-average hazard :math:`\\mu_i = c + b e^{g x_i}\\,\\mathrm{exprel}(g n_i)`.
    exposure : tuple of float
        Person-years per band used in the likelihood and weights.
    nominal_exposure : bool
        True when ``exposure`` is the nominal :data:`NOMINAL_EXPOSURE` x width (rates only).
    deviance : float
        Poisson deviance :math:`2\\sum [D \\ln(D/(E\\mu)) - (D - E\\mu)]` with :math:`D = E r`
        (reported for both methods; with nominal exposure its scale is arbitrary).
    wrss : float
        Weighted residual sum of squares on log rates, :math:`\\sum D_i (\\ln r_i - \\ln \\mu_i)^2`
        over bands with :math:`r_i > 0`.
    max_rel_error : float
        :math:`\\max_i |\\mu_i / r_i - 1|` over bands with :math:`r_i > 0`.
    converged : bool
        The optimizer reported success.
    message : str
        The optimizer's message.
    """

    b: float
    g: float
    c: float
    makeham: bool
    method: str
    sex: str
    age_range: tuple[float, float]
    band_starts: tuple[float, ...]
    band_widths: tuple[float, ...]
    observed_rates: tuple[float, ...]
    fitted_rates: tuple[float, ...]
    exposure: tuple[float, ...]
    nominal_exposure: bool
    deviance: float
    wrss: float
    max_rel_error: float
    converged: bool
    message: str

    @property
    def n_bands(self) -> int:
        """Number of bands fitted."""
        return len(self.band_starts)

    @property
    def doubling_time(self) -> float:
        """:math:`\\ln 2 / g` in years: the time for the Gompertz term to double (``inf`` if ``g = 0``,
        negative, i.e. a halving time, if ``g < 0``). About 8 years for human adults (Finch, Pike &
        Witten 1990)."""
        return math.inf if self.g == 0.0 else math.log(2.0) / self.g

    def to_hazard(self) -> Gompertz | GompertzMakeham:
        """``Gompertz(rate=b, shape=g)``, or ``GompertzMakeham(rate=b, shape=g, constant=c)`` when
        ``makeham``, on attained age in years."""
        if self.makeham:
            return GompertzMakeham(rate=self.b, shape=self.g, constant=self.c)
        return Gompertz(rate=self.b, shape=self.g)

    def summary(self) -> str:
        """One paragraph for reports: law, estimates, method, bands, exposure and fit quality."""
        law = "c + b exp(g a)" if self.makeham else "b exp(g a)"
        est = f"b = {self.b:.6g}, g = {self.g:.6g} per year"
        if self.makeham:
            est += f", c = {self.c:.6g} per year"
        meth = ("Poisson maximum likelihood" if self.method == "poisson"
                else "weighted least squares on log rates (weights = deaths = exposure x rate)")
        expo = (f"nominal exposure {NOMINAL_EXPOSURE:g} person-years x band width (rates only; the "
                f"estimates do not depend on its scale)" if self.nominal_exposure else "given exposure")
        ok = "" if self.converged else f" WARNING: the optimizer did not report success ({self.message})."
        return (f"Fitted h(a) = {law} to {self.n_bands} bands of sex {self.sex!r} within ages "
                f"{_num(self.age_range[0])}-{_num(self.age_range[1])} by {meth}, {expo}: {est}; doubling "
                f"time ln 2 / g = {self.doubling_time:.4g} years. Max relative error of band rates "
                f"{self.max_rel_error:.3g}, Poisson deviance {self.deviance:.4g}, weighted RSS on log "
                f"rates {self.wrss:.4g}.{ok}")


# Gauss-Legendre rule on [0, 1] for band averages of exp(g s) and its g-derivatives. With 32 nodes the
# rule is exact to rounding for |g n| up to ~20 (band width n), far beyond human mortality.
_GL_X, _GL_W = np.polynomial.legendre.leggauss(32)
_GL_T = 0.5 * (_GL_X + 1.0)
_GL_WT = 0.5 * _GL_W


class _Bands:
    """Band-average Gompertz(-Makeham) model on fixed bands, parameters theta = (beta, g[, gamma]).

    ``b = exp(beta - g a_ref)`` (``beta`` is the log hazard at the reference age ``a_ref``, which
    decorrelates it from ``g``) and ``c = exp(gamma)``.
    mu_i = c + exp(beta) v_i(g), v_i(g) = int_0^1 exp(g (x_i + n_i t - a_ref)) dt.
    """

    def __init__(self, starts: FloatArray, widths: FloatArray, a_ref: float, makeham: bool) -> None:
        self.s = starts[:, None] + widths[:, None] * _GL_T[None, :] - a_ref  # (k, 32)
        self.makeham = makeham
        self.p = 3 if makeham else 2

    def mu(self, th: FloatArray, derivs: int = 0) -> tuple[FloatArray, ...]:
        """mu (k,), and with derivs >= 1 the Jacobian (k, p), with derivs >= 2 the Hessians (k, p, p)."""
        beta, g = th[0], th[1]
        with np.errstate(over="ignore", invalid="ignore"):
            e = np.exp(g * self.s)
            v = e @ _GL_WT
            eb = math.exp(beta) if beta < 700.0 else math.inf
            c = math.exp(th[2]) if self.makeham and th[2] < 700.0 else (math.inf if self.makeham else 0.0)
            mu = c + eb * v
            if derivs == 0:
                return (mu,)
            v1 = (self.s * e) @ _GL_WT
            jac = np.empty((mu.size, self.p))
            jac[:, 0] = eb * v
            jac[:, 1] = eb * v1
            if self.makeham:
                jac[:, 2] = c
            if derivs == 1:
                return mu, jac
            v2 = (self.s * self.s * e) @ _GL_WT
            hes = np.zeros((mu.size, self.p, self.p))
            hes[:, 0, 0] = eb * v
            hes[:, 0, 1] = hes[:, 1, 0] = eb * v1
            hes[:, 1, 1] = eb * v2
            if self.makeham:
                hes[:, 2, 2] = c
            return mu, jac, hes

    def params(self, th: FloatArray, a_ref: float) -> tuple[float, float, float]:
        g = float(th[1])
        b = math.exp(float(th[0]) - g * a_ref)
        c = math.exp(float(th[2])) if self.makeham else 0.0
        return b, g, c


def _fit_poisson(model: _Bands, d: FloatArray, e: FloatArray, th0: FloatArray) -> tuple[FloatArray, bool, str]:
    """Minimise the Poisson deviance / (2 sum D) by a trust-region Newton method with exact Hessian."""
    scale = float(d.sum())
    pos = d > 0.0

    def nll(th: FloatArray) -> float:
        (mu,) = model.mu(th)
        if not np.all(np.isfinite(mu)) or not np.all(mu > 0.0):
            return math.inf
        return _half_deviance(d, e * mu, pos) / scale

    def grad(th: FloatArray) -> FloatArray:
        mu, jac = model.mu(th, 1)
        return ((e - d / mu) @ jac) / scale

    def hess(th: FloatArray) -> FloatArray:
        mu, jac, hes = model.mu(th, 2)
        w1 = e - d / mu
        w2 = d / (mu * mu)
        return (np.einsum("k,kij->ij", w1, hes) + (jac * w2[:, None]).T @ jac) / scale

    res = optimize.minimize(nll, th0, method="trust-exact", jac=grad, hess=hess,
                            options={"gtol": 1e-11, "maxiter": 500})
    th = np.asarray(res.x, dtype=np.float64)
    ok, msg = bool(res.success), str(res.message)
    if not ok:
        # trust-exact stops when the objective can no longer resolve an improvement (rounding level).
        # Accept the point when it is a strict minimum whose Newton step is negligible.
        step = _newton_step(grad(th), hess(th))
        if step is not None and np.all(np.abs(step) <= 1e-9 * (1.0 + np.abs(th))):
            ok = True
            msg += " Accepted: the Hessian is positive definite and the Newton step is below 1e-9."
    return th, ok, msg


def _half_deviance(d: FloatArray, em: FloatArray, pos: NDArray[np.bool_]) -> float:
    """Half the Poisson deviance, sum D (rho - 1 - ln rho) + sum_{D=0} E mu, rho = E mu / D.

    Written with ``delta - log1p(delta)``, ``delta = rho - 1``, so it keeps relative accuracy near the
    minimum (the naive ``E mu - D - D ln(E mu / D)`` cancels to rounding noise there).
    """
    delta = em[pos] / d[pos] - 1.0
    return float(np.sum(d[pos] * (delta - np.log1p(delta))) + np.sum(em[~pos]))


def _newton_step(grad: FloatArray, hess: FloatArray) -> FloatArray | None:
    """H^-1 grad if H is positive definite, else None."""
    try:
        chol = np.linalg.cholesky(hess)
    except np.linalg.LinAlgError:
        return None
    return np.linalg.solve(chol.T, np.linalg.solve(chol, grad))


def _fit_wls(model: _Bands, r: FloatArray, w: FloatArray, th0: FloatArray) -> tuple[FloatArray, bool, str]:
    """Minimise sum w (ln r - ln mu)^2 (w normalised to sum 1) by Levenberg-Marquardt."""
    keep = r > 0.0
    sw = np.sqrt(w[keep] / w[keep].sum())
    logr = np.log(r[keep])

    def resid(th: FloatArray) -> FloatArray:
        (mu,) = model.mu(th)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = sw * (logr - np.log(mu[keep]))
        return np.where(np.isfinite(out), out, 1e150)

    def jac(th: FloatArray) -> FloatArray:
        mu, j = model.mu(th, 1)
        out = -(sw / mu[keep])[:, None] * j[keep]
        return np.where(np.isfinite(out), out, 0.0)

    res = optimize.least_squares(resid, th0, jac=jac, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15,
                                 max_nfev=2000)
    return np.asarray(res.x, dtype=np.float64), bool(res.success), str(res.message)


def fit_gompertz(table: LifeTable, sex: str = "all", age_range: tuple[float, float] = (40, 90),
                 method: str = "poisson", makeham: bool = False, *,
                 exposure: ArrayLike | None = None) -> GompertzFit:
    """Fit a Gompertz (or Gompertz-Makeham) law to a life table's band rates.

    Parameters
    ----------
    table : LifeTable
        The table; its band rates are :meth:`LifeTable.band_rates` (constant force per band).
    sex : str
        Which column to fit.
    age_range : (float, float)
        ``(low, high)`` in years, ``0 <= low < high``; bands ``[x, x + n)`` with ``x >= low`` and
        ``x + n <= high`` are fitted. The open last band is never used.
    method : {"poisson", "wls"}
        ``"poisson"``: maximum likelihood with deaths :math:`D_i = E_i r_i` Poisson with mean
        :math:`E_i \\mu_i`. ``"wls"``: least squares on log rates with weights :math:`E_i r_i` (the
        inverse of the approximate variance :math:`1/D_i` of a log rate; Tai & Noymer 2018); bands
        with :math:`r_i = 0` have weight 0.
    makeham : bool
        Also fit the age-independent constant ``c``.
    exposure : array_like, optional
        Person-years at risk per table row (length ``len(table.ages)``; rows outside the fitted
        bands are ignored, used ones must be ``> 0`` and finite). Default: the nominal
        :data:`NOMINAL_EXPOSURE` person-years per year of band width, since a table of rates carries
        no counts. With nominal exposure only the relative weights matter: the estimates do not depend
        on the ``1e5`` scale, the deviance does.

    Returns
    -------
    GompertzFit

    Raises
    ------
    LifeTableError
        Bad ``table``, ``sex``, ``age_range``, ``method`` or ``exposure``; no band inside
        ``age_range``; fewer bands than parameters + 1 (3 for Gompertz, 4 for Gompertz-Makeham),
        counting only bands with a positive rate.

    Notes
    -----
    Model: :math:`h(a) = c + b e^{g a}` per year, ``a`` attained age in years. The fitted band rate is
    the band average of the hazard,

    .. math:: \\mu_i = \\frac{1}{n_i}\\int_{x_i}^{x_i+n_i} h(s)\\,ds
              = c + b e^{g x_i}\\,\\frac{e^{g n_i} - 1}{g n_i},

    which is what :math:`-\\ln(1 - q_i)/n_i` measures exactly; so a table generated by the law is
    recovered exactly for any band widths, with no mid-band approximation. Poisson: minimise
    :math:`\\sum_i E_i\\mu_i - D_i \\ln \\mu_i` (scipy ``trust-exact`` with the exact Hessian).
    WLS: minimise :math:`\\sum_i D_i (\\ln r_i - \\ln \\mu_i)^2` (scipy ``least_squares``,
    Levenberg-Marquardt). Internally ``b`` is replaced by the log hazard at the death-weighted mean age
    of the bands and ``c`` by ``ln c``; starting values come from a weighted straight-line fit of
    :math:`\\ln r` on mid-band age. If the data support no Makeham term, ``c`` tends to 0 (``ln c``
    to ``-inf``) and the fit may report non-convergence: fit without ``makeham`` then.
    Doubling time :math:`\\ln 2 / g`, about 8 years for human adults (Finch, Pike & Witten 1990).

    References
    ----------
    .. [1] Tai TH, Noymer A. Popul Ecol 2018 (Poisson and weighted least squares Gompertz fits).
    .. [2] Finch CE, Pike MC, Witten M. Science 1990;249:902-905.
    """
    if not isinstance(table, LifeTable):
        raise LifeTableError(f"fit_gompertz: table must be a LifeTable, got {type(table).__name__}",
                             key=("table",), value=type(table).__name__, rule="must be a LifeTable")
    sex = table._sex("fit_gompertz", sex)
    if method not in _FIT_METHODS:
        raise LifeTableError(f"fit_gompertz: method must be 'poisson' or 'wls', got {method!r}", key=("method",),
                             value=method, rule="must be 'poisson' or 'wls'")
    if not isinstance(makeham, (bool, np.bool_)):
        raise LifeTableError(f"fit_gompertz: makeham must be True or False, got {makeham!r}", key=("makeham",),
                             value=makeham, rule="must be True or False")
    makeham = bool(makeham)
    lo, hi = _age_range(age_range)

    ages = np.array(table.ages)
    widths = table.widths
    rates_all = table.band_rates(sex)
    ends = ages + widths
    sel = (ages >= lo) & (ends <= hi)  # the open band has end inf and is never selected
    if not np.any(sel):
        closed = (f"the table's closed bands span ages {_num(ages[0])} to {_num(ages[-1])}"
                  if ages.size > 1 else "the table has no closed band")
        rule = f"contains no whole band; {closed} (a band [x, x + n) is used when low <= x and x + n <= high)"
        raise LifeTableError(f"fit_gompertz: age_range {(lo, hi)!r} {rule}", key=("age_range",), value=(lo, hi),
                             rule=rule)
    if exposure is None:
        expo_all = NOMINAL_EXPOSURE * np.where(np.isfinite(widths), widths, 0.0)
        nominal = True
    else:
        expo_all = np.asarray(exposure, dtype=np.float64)
        if expo_all.shape != ages.shape:
            raise LifeTableError(f"fit_gompertz: exposure must have one value per table row "
                                 f"({ages.size}), got shape {expo_all.shape}", key=("exposure",),
                                 value=expo_all.shape, rule=f"must have one value per table row ({ages.size})")
        bad = sel & ~((expo_all > 0.0) & np.isfinite(expo_all))
        if np.any(bad):
            i = int(np.flatnonzero(bad)[0])
            raise LifeTableError(f"fit_gompertz: exposure[{i}] (age {_num(ages[i])}) must be > 0 and "
                                 f"finite, got {_fmt(expo_all[i])}", key=("exposure", i), value=float(expo_all[i]),
                                 rule=f"must be > 0 and finite (age {_num(ages[i])})")
        nominal = False

    x, n, r, e = ages[sel], widths[sel], rates_all[sel], expo_all[sel]
    d = e * r
    n_par = 3 if makeham else 2
    n_pos = int(np.count_nonzero(r > 0.0))
    if n_pos < n_par + 1:
        rule = (f"holds {x.size} bands, {n_pos} with a positive rate; a "
                f"{'Gompertz-Makeham' if makeham else 'Gompertz'} fit needs at least {n_par + 1} (parameters + 1)")
        raise LifeTableError(f"fit_gompertz: age_range {(lo, hi)!r} {rule}", key=("age_range",), value=(lo, hi),
                             rule=rule)

    pos = r > 0.0
    a_ref = float(np.sum(d * (x + 0.5 * n)) / d.sum())
    model = _Bands(x, n, a_ref, makeham)
    th0 = _start(x[pos] + 0.5 * n[pos] - a_ref, r[pos], d[pos], makeham)
    if method == "poisson":
        th, ok, msg = _fit_poisson(model, d, e, th0)
    else:
        th, ok, msg = _fit_wls(model, r, d, th0)
    b, g, c = model.params(th, a_ref)
    (mu,) = model.mu(th)
    if not (np.all(np.isfinite(mu)) and math.isfinite(b) and b > 0.0 and math.isfinite(g)):
        raise LifeTableError(f"fit_gompertz: the {method} fit failed ({msg}); check the rates in "
                             f"age_range {(lo, hi)!r}", key=("age_range",), value=(lo, hi),
                             rule=f"the {method} fit failed ({msg}); check the rates in this age range")
    deviance = 2.0 * _half_deviance(d, e * mu, pos)
    wrss = float(np.sum(d[pos] * (np.log(r[pos]) - np.log(mu[pos])) ** 2))
    max_rel = float(np.max(np.abs(mu[pos] / r[pos] - 1.0)))
    return GompertzFit(
        b=b, g=g, c=c, makeham=makeham, method=method, sex=sex, age_range=(lo, hi),
        band_starts=tuple(x.tolist()), band_widths=tuple(n.tolist()), observed_rates=tuple(r.tolist()),
        fitted_rates=tuple(mu.tolist()), exposure=tuple(e.tolist()), nominal_exposure=nominal,
        deviance=deviance, wrss=wrss, max_rel_error=max_rel, converged=ok, message=msg)


def _age_range(age_range: Any) -> tuple[float, float]:
    ok = (isinstance(age_range, Sequence) and not isinstance(age_range, str) and len(age_range) == 2
          and all(isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_)) for v in age_range))
    if ok:
        lo, hi = float(age_range[0]), float(age_range[1])
        if 0.0 <= lo < hi and math.isfinite(lo) and not math.isnan(hi):
            return lo, hi
    rule = "must be (low, high) with 0 <= low < high, low finite"
    raise LifeTableError(f"fit_gompertz: age_range {rule}, got {age_range!r}", key=("age_range",), value=age_range,
                         rule=rule)


def _start(t: FloatArray, r: FloatArray, w: FloatArray, makeham: bool) -> FloatArray:
    """Starting values: weighted straight line through ln(r - c0) against centred mid-band age."""
    c0 = 0.5 * float(r.min()) if makeham else 0.0
    y = np.log(r - c0)
    ww = w / w.sum()
    tm = float(ww @ t)
    ym = float(ww @ y)
    var = float(ww @ (t - tm) ** 2)
    g0 = float(ww @ ((t - tm) * (y - ym)) / var) if var > 0.0 else 0.0
    beta0 = ym - g0 * tm
    th = [beta0, g0]
    if makeham:
        th.append(math.log(c0))
    return np.array(th)

"""Penalised cubic regression splines with smoothing chosen by generalised cross-validation: the
nonparametric regression behind the EVPPI estimate (docs/methods.md, 'Regression splines for EVPPI').

One parameter: a cubic B-spline basis with knots at quantiles of the data and the curvature penalty
``∫ f''(x)² dx``. Several parameters: either the tensor product of such bases (all interactions)
with one curvature penalty per parameter, or an additive model (no interactions, each term centred).
The smoothing parameters minimise ``GCV(λ) = N RSS(λ) / (N - tr A(λ))²`` (Craven & Wahba 1979;
Wood 2017, Generalized Additive Models, 2nd ed., ch. 4-5, from memory).

The dense algebra here is small (at most a few hundred columns) and repeated hundreds of times per
fit, where a multithreaded BLAS only adds contention: the fits run with BLAS limited to one thread
(on a loaded 2-core machine a four-parameter fit took 35 s with OpenBLAS threads, 0.8 s without).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.linalg as sla
from scipy.interpolate import BSpline
from scipy.optimize import minimize, minimize_scalar
from threadpoolctl import threadpool_limits

from sim.problems import ValidationError

__all__ = ["SplineBasis", "SplineFit"]

Structure = Literal["tensor", "additive"]
_LOG10_LAMBDA = (-9.0, 9.0)  # search range for the (scaled) smoothing parameters


@dataclass(frozen=True)
class SplineFit:
    """One response fitted by :meth:`SplineBasis.fit`.

    Attributes
    ----------
    fitted : fitted values at the data (length N).
    edf : effective degrees of freedom ``tr A`` (number of parameters the fit uses).
    smoothing : the chosen smoothing parameters, one per penalty (scaled penalties).
    gcv : the minimised GCV score.
    r_squared : ``1 - RSS / Σ (y - ȳ)²`` (1 when y is constant).
    residual_sd : ``sqrt(RSS / (N - edf))``.
    """

    fitted: np.ndarray
    edf: float
    smoothing: tuple[float, ...]
    gcv: float
    r_squared: float
    residual_sd: float


def _marginal(x: np.ndarray, size: int) -> tuple[np.ndarray, np.ndarray]:
    """Cubic B-spline design matrix (N, k) of one variable and its curvature penalty (k, k).

    Interior knots at equally spaced quantiles of ``x``; ``k`` is reduced to the number of distinct
    values (a variable with 2 or 3 values gets a linear or quadratic polynomial basis, one value a
    constant). The penalty ``S_ab = ∫ B_a'' B_b'' dx`` is exact: ``B''`` is piecewise linear, so
    Simpson's rule on each knot interval integrates the products without error.
    """
    lo, hi = float(x.min()), float(x.max())
    k = min(size, len(np.unique(x)))
    if k <= 1 or hi <= lo:
        return np.ones((len(x), 1)), np.zeros((1, 1))
    degree = min(3, k - 1)
    inner = np.quantile(x, np.linspace(0, 1, k - degree + 1)[1:-1]) if k > degree + 1 else np.array([])
    inner = np.unique(inner[(inner > lo) & (inner < hi)])
    knots = np.concatenate([[lo] * (degree + 1), inner, [hi] * (degree + 1)])
    k = len(knots) - degree - 1
    design = BSpline.design_matrix(np.clip(x, lo, hi), knots, degree).toarray()
    penalty = np.zeros((k, k))
    if degree >= 2:
        spline = BSpline(knots, np.eye(k), degree)
        edges = np.unique(knots)
        a, b = edges[:-1], edges[1:]
        d2 = [spline(pts, nu=2) for pts in (a, (a + b) / 2, b)]  # each (intervals, k)
        w = (b - a) / 6.0
        for left, mid, right, wi in zip(*d2, w):
            penalty += wi * (np.outer(left, left) + 4 * np.outer(mid, mid) + np.outer(right, right))
    return design, penalty


class SplineBasis:
    """A penalised regression-spline basis for the columns of ``x``, built once and fitted to any
    number of responses.

    Parameters
    ----------
    x : array (N, m): the regressors (here: the parameters of interest in each draw).
    structure : ``"tensor"`` (tensor product of the marginal bases: the full interaction surface,
        as a ``te()`` smooth; m <= 4) or ``"additive"`` (a sum of one smooth per column).
    basis_size : basis functions per variable (>= 4). Default: 20 for one variable (the penalty,
        not the basis, sets the smoothness, and 20 columns cost nothing), 10 for additive terms (the
        default of ``s()`` in Wood's mgcv, from memory); for a tensor product as many as
        the draws support, between 4 and 8 per variable with at most ``min(N/4, 300)`` columns in all
        (mgcv's ``te()`` uses 5, too few for a curved surface over a wide range). The basis is shrunk
        (to no fewer than 4 per variable) until it has at most N/2 columns; fewer draws than twice
        the columns are refused (the fit would follow the noise and inflate the EVPPI).

    Notes
    -----
    Tensor product: design ``X = B_1 ⊙ ... ⊙ B_m`` (row-wise Kronecker product), penalties
    ``S_j = I ⊗ ... ⊗ S̃_j ⊗ ... ⊗ I``, one smoothing parameter each (Wood 2006, Biometrics
    62:1025-1036, from memory). Additive: ``X = [1, B_1 Z_1, ..., B_m Z_m]`` with ``Z_j`` a basis of
    the columns orthogonal to ``1' B_j`` (sum-to-zero constraints), penalties ``Z_j' S̃_j Z_j``.
    Each penalty is scaled to the norm of ``X'X`` so that one search range of ``λ`` fits all data.
    """

    def __init__(self, x: np.ndarray, *, structure: Structure = "tensor", basis_size: int | None = None) -> None:
        with threadpool_limits(limits=1, user_api="blas"):
            self._build(np.asarray(x, dtype=float), structure, basis_size)

    def _build(self, x: np.ndarray, structure: Structure, basis_size: int | None) -> None:
        if x.ndim == 1:
            x = x[:, None]
        n, m = x.shape
        if structure not in ("tensor", "additive"):
            raise ValidationError(("structure",), "must be 'tensor' or 'additive'", structure)
        if structure == "tensor" and m > 4:
            raise ValidationError(("parameters",), "a tensor-product smooth takes at most 4 parameters "
                                  "(use structure='additive' or a smaller group)", m)
        if not np.isfinite(x).all():
            raise ValidationError(("parameters",), "must be finite in every draw", "NaN or infinite")
        if basis_size is not None and (isinstance(basis_size, bool) or int(basis_size) != basis_size
                                       or basis_size < 4):
            raise ValidationError(("basis_size",), "must be an integer >= 4", basis_size)
        if basis_size is not None:
            size = int(basis_size)
        elif m == 1:
            size = 20
        elif structure == "additive":
            size = 10
        else:  # as many as the draws support: <= N/4 and <= 300 columns in all, 4 to 8 per variable
            size = int(max(4, min(8, np.floor(min(n / 4, 300) ** (1 / m) + 1e-9))))
        columns = (lambda k: k ** m) if structure == "tensor" else (lambda k: 1 + m * (k - 1))  # noqa: E731
        while size > 4 and columns(size) > n / 2:
            size -= 1
        if structure == "tensor":
            margins = [_marginal(x[:, j], size) for j in range(m)]
            design = margins[0][0]
            for b, _ in margins[1:]:
                design = (design[:, :, None] * b[:, None, :]).reshape(n, -1)
            dims = [b.shape[1] for b, _ in margins]
            penalties = []
            for j, (_, s) in enumerate(margins):
                if not s.any():
                    continue
                full = np.ones((1, 1))
                for i, d in enumerate(dims):
                    full = np.kron(full, s if i == j else np.eye(d))
                penalties.append(full)
        else:
            blocks, raw = [np.ones((n, 1))], []
            for j in range(m):
                b, s = _marginal(x[:, j], size)
                if b.shape[1] == 1:
                    continue
                z = sla.null_space(b.mean(axis=0)[None, :])
                blocks.append(b @ z)
                raw.append(z.T @ s @ z)
            design = np.hstack(blocks)
            penalties, start = [], 1
            for block, s in zip(blocks[1:], raw):
                full = np.zeros((design.shape[1],) * 2)
                width = block.shape[1]
                full[start:start + width, start:start + width] = s
                start += width
                if s.any():
                    penalties.append(full)
        if 2 * design.shape[1] > n:
            raise ValidationError(("draws",), f"must number at least {2 * design.shape[1]}: twice the "
                                  f"{design.shape[1]} columns of the basis ({m} parameter(s), {structure})", n)
        self.design = design
        q, self._r = np.linalg.qr(design)
        self._q = q
        gram = self._r.T @ self._r
        scale = np.linalg.norm(gram)
        self.penalties = [s * (scale / np.linalg.norm(s)) for s in penalties]
        self._jitter = 1e-10 * np.trace(gram) / gram.shape[0] * np.eye(gram.shape[0])
        self._gram = gram

    @property
    def n_columns(self) -> int:
        return self.design.shape[1]

    def _solve(self, log10_lambda: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, float, float]:
        """(coefficients, ||f - R β||², tr A) for the given smoothing parameters."""
        m = self._gram + self._jitter
        for lam, s in zip(np.atleast_1d(log10_lambda), self.penalties):
            m = m + 10.0 ** lam * s
        chol = sla.cho_factor(m, lower=True)
        beta = sla.cho_solve(chol, self._r.T @ f)
        half = sla.solve_triangular(chol[0], self._r.T, lower=True)
        return beta, float(np.sum((f - self._r @ beta) ** 2)), float(np.sum(half ** 2))

    def smooth(self, smoothing: tuple[float, ...], z: np.ndarray) -> np.ndarray:
        """Fitted values, at the given smoothing parameters, of responses whose projections on the
        basis's column space are ``Q z``: ``Q R (R'R + Σ λ_j S_j)^{-1} R' z``.

        Parameters
        ----------
        smoothing : the smoothing parameters (as :attr:`SplineFit.smoothing`).
        z : array (p, S): coordinates in the orthonormal basis ``Q`` of the column space (p columns).

        Returns
        -------
        numpy.ndarray (N, S). Used to propagate residual noise through a fit: for ``ε`` with
        independent ``N(0, σ²)`` entries, ``Q'ε`` has independent ``N(0, σ²)`` entries, so
        ``smooth(λ, Q'ε) = A ε`` is the fit's own error.
        """
        with threadpool_limits(limits=1, user_api="blas"):
            m = self._gram + self._jitter
            for lam, s in zip(smoothing, self.penalties):
                m = m + lam * s
            sol = sla.cho_solve(sla.cho_factor(m, lower=True), self._r.T @ z)
            return self._q @ (self._r @ sol)

    def fit(self, y: np.ndarray) -> SplineFit:
        """Fit one response ``y`` (length N), choosing the smoothing parameters by GCV.

        Notes
        -----
        With ``X = QR``, ``f = Q'y``: ``β(λ) = (R'R + Σ λ_j S_j)^{-1} R'f``,
        ``RSS = ||y||² - ||f||² + ||f - Rβ||²``, ``tr A = tr(R (R'R + Σ λ_j S_j)^{-1} R')``.
        One penalty: a grid over ``log10 λ`` then a bounded scalar search around the best point;
        several: the best common ``λ`` on the grid, then Nelder-Mead over the vector of ``log10 λ``.
        """
        with threadpool_limits(limits=1, user_api="blas"):
            return self._fit(y)

    def _fit(self, y: np.ndarray) -> SplineFit:
        y = np.asarray(y, dtype=float)
        n = len(y)
        f = self._q.T @ y
        rss0 = max(float(y @ y - f @ f), 0.0)
        tss = float(np.sum((y - y.mean()) ** 2))

        def gcv(log_lam: np.ndarray) -> float:
            log_lam = np.clip(np.atleast_1d(log_lam), *_LOG10_LAMBDA)
            _, rss, tr = self._solve(log_lam, f)
            return n * (rss0 + rss) / max(n - tr, 1e-9) ** 2

        k = len(self.penalties)
        if k == 0:
            best = np.zeros(0)
        else:
            grid = np.linspace(*_LOG10_LAMBDA, 37)
            scores = [gcv(np.full(k, g)) for g in grid]
            i = int(np.argmin(scores))
            lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
            if k == 1:
                res = minimize_scalar(lambda v: gcv(np.array([v])), bounds=(lo, hi), method="bounded",
                                      options={"xatol": 1e-3})
                best = np.array([res.x if res.fun <= scores[i] else grid[i]])
            else:
                res = minimize(gcv, np.full(k, grid[i]), method="Nelder-Mead",
                               options={"xatol": 0.05, "fatol": 1e-6 * scores[i], "maxfev": 30 * k})
                best = np.clip(res.x, *_LOG10_LAMBDA) if res.fun <= scores[i] else np.full(k, grid[i])
        beta, rss, tr = self._solve(best, f)
        total_rss = rss0 + rss
        fitted = self.design @ beta
        return SplineFit(
            fitted=fitted, edf=tr, smoothing=tuple(float(10.0 ** v) for v in best),
            gcv=n * total_rss / max(n - tr, 1e-9) ** 2,
            r_squared=1.0 - total_rss / tss if tss > 0 else 1.0,
            residual_sd=float(np.sqrt(total_rss / max(n - tr, 1e-9))),
        )

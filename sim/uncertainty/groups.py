"""Distributions of several parameters drawn together: :class:`Dirichlet` (shares summing to 1) and
:class:`MultivariateNormal` (a correlated group on its estimation scale). Like the univariate
families (:mod:`.distributions`) they map uniforms to values, one row of uniforms per draw.
See docs/methods.md, 'Parameter uncertainty'.

References
----------
.. [1] Briggs A, Claxton K, Sculpher M. Decision Modelling for Health Economic Evaluation. Oxford
   University Press; 2006. Chapter 4.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from .distributions import Beta, Distribution, LogNormal, Normal, Univariate, _fail, _real, _uniforms

__all__ = ["Group", "Dirichlet", "MultivariateNormal", "TRANSFORMS"]

TRANSFORMS = ("identity", "log", "logit")
"""Estimation scales of a multivariate normal's elements: the value is the element itself, its
exponential or its inverse logit."""


class Group(Distribution):
    """A distribution of several parameters drawn together (:class:`Dirichlet`,
    :class:`MultivariateNormal`)."""

    def marginal(self, i: int) -> Univariate | None:
        """Element ``i``'s own distribution when it has a closed form (for a preview), else None."""
        return None


@dataclass(frozen=True)
class Dirichlet(Group):
    """Dirichlet(alpha): shares ``x_k = G_k / sum_j G_j`` with independent ``G_k ~ Gamma(alpha_k, 1)``
    (each drawn by its quantile function from its own uniform). Mean ``alpha_k / alpha_0``; element
    ``k`` alone is Beta(alpha_k, alpha_0 - alpha_k) (Briggs, Claxton & Sculpher 2006, ch. 4)."""

    alpha: tuple[float, ...]
    family: ClassVar[str] = "dirichlet"

    def __post_init__(self) -> None:
        raw = self.alpha
        if isinstance(raw, (str, bytes)) or np.ndim(raw) != 1 or len(raw) < 2:
            raise _fail("alpha", "must be a list of at least 2 numbers", raw)
        object.__setattr__(self, "alpha", tuple(_real(("alpha", i), a, positive=True) for i, a in enumerate(raw)))
        if not math.isfinite(math.fsum(self.alpha)):
            raise _fail("alpha", "must have a finite sum", list(raw))

    @property
    def size(self) -> int:
        return len(self.alpha)

    def means(self) -> np.ndarray:
        a = np.array(self.alpha)
        return a / a.sum()

    def marginal(self, i: int) -> Beta:
        total = sum(self.alpha)
        return Beta(self.alpha[i], total - self.alpha[i])

    def intervals(self, level: float = 0.95) -> np.ndarray:
        return np.array([self.marginal(i).interval(level) for i in range(self.size)])

    def transform(self, u: ArrayLike) -> np.ndarray:
        u = _uniforms(u)
        g = special.gammaincinv(np.array(self.alpha), u)
        # a gamma quantile can underflow to 0 for a tiny share; all-zero rows fall back to the
        # largest share's element (the limit of the normalised draws)
        total = g.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            x = g / total
        empty = ~(total[:, 0] > 0)
        if empty.any():
            x[empty] = 0.0
            x[empty, int(np.argmax(self.alpha))] = 1.0
        return x

    def parameters(self) -> dict[str, Any]:
        return {"alpha": list(self.alpha)}


def _as_matrix(key: str, raw: Any, n: int) -> np.ndarray:
    try:
        m = np.array(raw, dtype=np.float64)
    except (TypeError, ValueError):
        raise _fail(key, f"must be a {n} x {n} table of numbers (a list of {n} lists)", raw) from None
    if m.shape != (n, n) or any(isinstance(x, (bool, np.bool_)) for row in raw for x in row):
        raise _fail(key, f"must be a {n} x {n} table of numbers (a list of {n} lists)", raw)
    if not np.all(np.isfinite(m)):
        raise _fail(key, "must hold finite numbers", raw)
    return m


@dataclass(frozen=True)
class MultivariateNormal(Group):
    """A correlated group: ``Z = mean + L z`` with ``z`` standard normal (``z_j = Phi^-1(u_j)``) and
    ``L L^T = covariance`` (Cholesky; for a semi-definite matrix, the symmetric square root from the
    eigendecomposition with negative round-off eigenvalues set to 0). Each element is then taken
    back from its estimation scale (``transform``): itself, ``exp(Z)`` or ``1 / (1 + exp(-Z))``.

    ``mean`` and ``covariance`` are on the estimation scale (e.g. a fitted Weibull's log shape and
    log scale with the covariance matrix of the fit). :meth:`means` are the means of the values
    (``exp(m + v/2)`` for a log element; Gauss-Hermite quadrature for a logit element).
    """

    mean: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    transforms: tuple[str, ...] = ()
    family: ClassVar[str] = "multivariate_normal"

    def __post_init__(self) -> None:
        raw = self.mean
        if isinstance(raw, (str, bytes)) or np.ndim(raw) != 1 or len(raw) < 2:
            raise _fail("mean", "must be a list of at least 2 numbers", raw)
        mean = tuple(_real(("mean", i), v) for i, v in enumerate(raw))
        n = len(mean)
        cov = _as_matrix("covariance", self.covariance, n)
        if not np.array_equal(cov, cov.T):
            i, j = np.argwhere(cov != cov.T)[0]
            raise _fail(("covariance", int(i), int(j)), f"must equal covariance[{j}][{i}] (a covariance matrix is "
                                                        f"symmetric)", float(cov[i, j]))
        if np.any(np.diag(cov) < 0):
            i = int(np.argmax(np.diag(cov) < 0))
            raise _fail(("covariance", i, i), "must be >= 0 (a variance)", float(cov[i, i]))
        with np.errstate(all="ignore"):
            w = np.linalg.eigvalsh(cov)
        if not np.all(np.isfinite(w)):
            raise _fail("covariance", "is too large for floating point numbers; rescale the parameters",
                        [list(map(float, r)) for r in cov])
        tol = 1e-10 * max(1.0, float(np.max(np.abs(w))))
        if w[0] < -tol:
            raise _fail("covariance", f"must be positive semi-definite (its smallest eigenvalue is {w[0]:.4g})",
                        [list(map(float, r)) for r in cov])
        transform = tuple(self.transforms) if self.transforms else ("identity",) * n
        if len(transform) != n:
            raise _fail("transform", f"must list {n} scales, one per parameter", list(transform))
        for i, t in enumerate(transform):
            if t not in TRANSFORMS:
                raise _fail(("transform", i), f"must be one of {list(TRANSFORMS)}", t)
        object.__setattr__(self, "mean", mean)
        object.__setattr__(self, "covariance", tuple(tuple(float(x) for x in r) for r in cov))
        object.__setattr__(self, "transforms", transform)

    @property
    def size(self) -> int:
        return len(self.mean)

    @property
    def factor(self) -> np.ndarray:
        """``L`` with ``L L^T = covariance``: the Cholesky factor, or for a singular matrix the
        symmetric square root ``V diag(sqrt(max(w, 0))) V^T``."""
        cov = np.array(self.covariance)
        try:
            return np.linalg.cholesky(cov)
        except np.linalg.LinAlgError:
            w, v = np.linalg.eigh(cov)
            return (v * np.sqrt(np.clip(w, 0.0, None))) @ v.T

    def _back(self, z: np.ndarray) -> np.ndarray:
        out = np.array(z, dtype=np.float64, copy=True)
        with np.errstate(over="ignore"):
            return self._back_into(out, z)

    def _back_into(self, out: np.ndarray, z: np.ndarray) -> np.ndarray:
        for j, t in enumerate(self.transforms):
            if t == "log":
                out[..., j] = np.exp(z[..., j])
            elif t == "logit":
                out[..., j] = special.expit(z[..., j])
        return out

    def transform(self, u: ArrayLike) -> np.ndarray:
        z = special.ndtri(_uniforms(u))
        with np.errstate(over="ignore", invalid="ignore"):
            return self._back(np.array(self.mean) + z @ self.factor.T)

    def means(self) -> np.ndarray:
        m = np.array(self.mean)
        v = np.diag(np.array(self.covariance))
        out = m.copy()
        nodes, weights = special.roots_hermitenorm(64)
        weights = weights / weights.sum()
        for j, t in enumerate(self.transforms):
            if t == "log":
                out[j] = np.exp(np.float64(m[j] + v[j] / 2.0)) if m[j] + v[j] / 2.0 < 709.0 else math.inf
            elif t == "logit":
                out[j] = float(np.sum(weights * special.expit(m[j] + math.sqrt(v[j]) * nodes)))
        return out

    def intervals(self, level: float = 0.95) -> np.ndarray:
        z = float(special.ndtri((1.0 + level) / 2.0))
        m = np.array(self.mean)
        s = np.sqrt(np.diag(np.array(self.covariance)))
        return np.stack([self._back((m - z * s)[None, :])[0], self._back((m + z * s)[None, :])[0]], axis=1)

    def parameters(self) -> dict[str, Any]:
        out: dict[str, Any] = {"mean": list(self.mean), "covariance": [list(r) for r in self.covariance]}
        if any(t != "identity" for t in self.transforms):
            out["transform"] = list(self.transforms)
        return out

    def marginal(self, i: int) -> Univariate | None:
        m, v = self.mean[i], self.covariance[i][i]
        if v <= 0:
            return None
        t = self.transforms[i]
        if t == "identity":
            return Normal(m, math.sqrt(v))
        if t == "log":
            return LogNormal(m, math.sqrt(v))
        return None

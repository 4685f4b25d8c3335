"""Reproducible parameter draws: which parameters are uncertain (:class:`UncertainInput`) and the
table of their values for draws ``start .. start + n - 1`` (:func:`draw_table`).

Draw ``i`` of a group of parameters is a function of the seed, the group's parameter names and
``i`` only, whatever the number of draws asked for, the first draw of a chunk or the order of the
other groups: its uniforms come from the counter-based generator Philox4x64-10 (Salmon et al. 2011)
keyed by ``SeedSequence([TAG, seed, hash of the names])`` at counter ``(i, block, 0, 0)``, four
uniforms per block. Each uniform is ``(k + 1/2) 2^-52`` with ``k`` the top 52 bits of a 64-bit
output, so it lies strictly inside (0, 1). Values follow by each distribution's quantile function
(univariate), normalised gamma quantiles (Dirichlet) or a Cholesky factor (multivariate normal):
see :mod:`.distributions` and :mod:`.groups`, and docs/methods.md, 'Reproducible draws'.

References
----------
.. [1] Salmon JK, Moraes MA, Dror RO, Shaw DE. Parallel random numbers: as easy as 1, 2, 3.
   Proceedings of SC11, 2011.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from ..problems import Problem, ValidationError
from .distributions import Distribution, Univariate

__all__ = ["UncertainInput", "draw_table", "group_uniforms", "DRAW_TAG"]

DRAW_TAG = 0x5053_4144_5241_5753
"""First word of every draw key ("PSADRAWS"): parameter draws never share a key with another use of
the same seed."""
_BLOCK = 4  # uniforms per Philox4x64 counter


def _hashable(value: Any) -> Any:
    """``value`` with its lists, arrays and mappings turned into tuples (a fit's inputs such as an
    ``interval = [lo, hi]`` or a correlation matrix), so that an input can be hashed."""
    if isinstance(value, Mapping):
        return tuple((k, _hashable(v)) for k, v in value.items())
    if isinstance(value, (list, tuple, np.ndarray)):
        return tuple(_hashable(v) for v in value)
    return value


@dataclass(frozen=True)
class UncertainInput:
    """One uncertain parameter, or a group drawn together, with its distribution.

    Attributes
    ----------
    keys : the parameter names (as :func:`sim.io.scenario.parameters` reports them), one per element
        of the distribution.
    distribution : a :class:`~.distributions.Univariate` for one key, a
        :class:`~.groups.Dirichlet` or :class:`~.groups.MultivariateNormal` for a group.
    fitted_from : the values it was fitted from by the method of moments (``{"mean": 0.86,
        "se": 0.02}``), empty when given by its own parameters.
    description : free text (the source of the estimate).
    """

    keys: tuple[str, ...]
    distribution: Distribution
    fitted_from: Mapping[str, Any] = field(default_factory=dict)
    description: str = ""

    def __post_init__(self) -> None:
        keys = (self.keys,) if isinstance(self.keys, str) else tuple(self.keys)
        if not keys or not all(isinstance(k, str) and k for k in keys):
            raise ValidationError(("parameters",), "must name at least one parameter", list(keys))
        if len(set(keys)) != len(keys):
            raise ValidationError(("parameters",), "must not name a parameter twice", list(keys))
        if len(keys) != self.distribution.size:
            raise ValidationError(("parameters",), f"a {self.distribution.family} distribution here gives "
                                                   f"{self.distribution.size} values: name as many parameters",
                                  list(keys))
        object.__setattr__(self, "keys", keys)
        object.__setattr__(self, "fitted_from", dict(self.fitted_from))

    def __hash__(self) -> int:
        return hash((self.keys, self.distribution, _hashable(self.fitted_from), self.description))

    @property
    def univariate(self) -> bool:
        return isinstance(self.distribution, Univariate)

    def means(self) -> dict[str, float]:
        """The mean of each parameter (for a fit to a stated mean, that mean as written: the fitted
        distribution's differs from it by rounding only)."""
        if self.univariate and "mean" in self.fitted_from:
            return {self.keys[0]: float(self.fitted_from["mean"])}
        return dict(zip(self.keys, map(float, self.distribution.means())))

    def intervals(self, level: float = 0.95) -> dict[str, tuple[float, float]]:
        """The equal-tailed interval of each parameter."""
        return {k: (float(lo), float(hi)) for k, (lo, hi) in zip(self.keys, self.distribution.intervals(level))}


def _key(seed: int, names: Sequence[str]) -> np.ndarray:
    digest = hashlib.sha256("\x1f".join(names).encode("utf-8")).digest()
    words = [int.from_bytes(digest[i:i + 4], "little") for i in range(0, 16, 4)]
    return np.random.SeedSequence([DRAW_TAG, int(seed), *words]).generate_state(2, np.uint64)


def group_uniforms(seed: int, names: Sequence[str], size: int, start: int, n: int) -> np.ndarray:
    """The uniforms of draws ``start .. start + n - 1`` for the group ``names`` of ``size`` elements:
    shape ``(n, size)``, strictly inside (0, 1); row ``i`` depends on ``(seed, names, start + i)``
    only (see the module docstring)."""
    key = _key(seed, names)
    blocks = -(-size // _BLOCK)
    out = np.empty((n, blocks * _BLOCK))
    for b in range(blocks):
        raw = np.random.Philox(key=key, counter=[start, b, 0, 0]).random_raw(n * _BLOCK)
        out[:, b * _BLOCK:(b + 1) * _BLOCK] = ((raw >> np.uint64(12)).astype(np.float64) + 0.5).reshape(n, _BLOCK)
    out *= 2.0 ** -52
    return out[:, :size]


def _check_int(name: str, value: Any, minimum: int) -> int:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise ValidationError((name,), f"must be a whole number >= {minimum}", value)
    return int(value)


def draw_table(specs: Iterable[UncertainInput], n_draws: int, seed: int, start: int = 0) -> pd.DataFrame:
    """The values of every uncertain parameter for draws ``start .. start + n_draws - 1``.

    Parameters
    ----------
    specs : the uncertain inputs (each naming its parameters).
    n_draws : number of draws (>= 0).
    seed : the run's seed (>= 0).
    start : index of the first draw (>= 0).

    Returns
    -------
    pandas.DataFrame
        Index ``draw`` (``start .. start + n_draws - 1``), one float column per parameter key in the
        order of ``specs``. Row ``i`` is identical whatever ``n_draws`` and ``start`` (and the other
        specs), so chunks of draws can be computed anywhere and concatenated.

    Raises
    ------
    ValidationError
        A parameter named by two specs, or a bad ``n_draws``, ``seed`` or ``start``.
    """
    specs = list(specs)
    n = _check_int("n_draws", n_draws, 0)
    seed = _check_int("seed", seed, 0)
    start = _check_int("start", start, 0)
    if start + n > 2 ** 63:
        raise ValidationError(("start",), "start + n_draws must be at most 2^63", start)
    seen: dict[str, int] = {}
    problems = []
    for j, spec in enumerate(specs):
        for k in spec.keys:
            if k in seen:
                problems.append(Problem((j, "parameters"), f"names {k!r}, already drawn by input {seen[k]}", k))
            seen.setdefault(k, j)
    if problems:
        raise ValidationError.of(problems)
    columns: dict[str, np.ndarray] = {}
    for spec in specs:
        u = group_uniforms(seed, spec.keys, spec.distribution.size, start, n)
        values = np.asarray(spec.distribution.transform(u), dtype=np.float64).reshape(n, len(spec.keys))
        for j, k in enumerate(spec.keys):
            columns[k] = values[:, j]
    index = pd.RangeIndex(start, start + n, name="draw")
    return pd.DataFrame(columns, index=index, columns=list(seen), dtype=np.float64)


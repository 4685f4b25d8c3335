"""Which arm is the reference of a two-arm fit. :class:`~sim.evidence.SurvivalData` lists its arms in
sorted order and :func:`~sim.evidence.fit_family` takes the first as the reference (the effect is the
second arm's against it); :func:`reference_first` returns the same data with a chosen arm first, so
the hazards fitted are that arm's and the effect is the other arm's against it
(``hazardtrace fit --reference ARM``).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from .data import SurvivalData, SurvivalDataError

__all__ = ["reference_first"]


@dataclass(frozen=True, eq=False)
class _ReferenceFirst(SurvivalData):
    """Survival data whose :attr:`groups` start with ``reference`` (the rest in sorted order)."""

    reference: str = ""

    @property
    def groups(self) -> tuple[str, ...]:
        rest = tuple(g for g in SurvivalData.groups.fget(self) if g != self.reference)  # type: ignore[attr-defined]
        return (self.reference,) + rest


def reference_first(data: SurvivalData, reference: str | None, *, key: str = "reference") -> SurvivalData:
    """``data`` with ``reference`` as its first arm (the reference of the two-arm effect); ``data``
    itself when ``reference`` is None. ``key`` names the setting in a problem (``--reference``).

    Raises
    ------
    SurvivalDataError
        The data have no arm column, or ``reference`` is not one of their arms.
    """
    if reference is None:
        return data
    arms = SurvivalData.groups.fget(data)  # type: ignore[attr-defined]
    if reference not in arms:
        rule = (f"must be one of the arms {list(arms)}" if arms else
                "needs an arm column (--arm-column): the data have one arm")
        raise SurvivalDataError((key,), rule, reference)
    values = {f.name: getattr(data, f.name) for f in fields(SurvivalData)}
    return _ReferenceFirst(**values, reference=reference)

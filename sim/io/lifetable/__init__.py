"""Life tables: reading, conversion to a piecewise-constant hazard, and Gompertz fits.

Modules: :mod:`.table` (:class:`LifeTable`, validation, conversion), :mod:`.reading`
(:func:`read_life_table`, CSV and xlsx cells), :mod:`.gompertz_fit` (:class:`GompertzFit`,
:func:`fit_gompertz`), :mod:`.errors` (:class:`LifeTableError`).

A life table gives, for age bands :math:`[x_i, x_{i+1})`, either

* ``kind="q"``: :math:`q_i`, the probability that someone alive at exact age :math:`x_i` dies before
  :math:`x_{i+1}`, or
* ``kind="m"``: :math:`m_i`, the central death rate per year (deaths / person-years lived in the band).

The user states which; it is never guessed. The last row starts the open band :math:`[x_{n-1}, \\infty)`.

Conversion to a hazard (docs/methods.md, 'Life tables and Gompertz fits')
-------------------------------------------------------------------------
Each band gets a constant force of mortality :math:`r_i` on attained age (years), so that the result
is a :class:`~sim.hazards.PiecewiseConstant` on the age clock:

* ``q``: :math:`r_i = -\\ln(1 - q_i)/n_i` with :math:`n_i = x_{i+1} - x_i`. Then
  :math:`\\exp(-r_i n_i) = 1 - q_i`, so survival at the band edges reproduces the table exactly,
  :math:`S(x_k)/S(x_0) = \\prod_{i<k}(1 - q_i)`, whatever the shape of the hazard inside the band
  (:math:`-\\ln(1 - q_i)` is the band's integrated hazard). The alternatives, e.g.
  :math:`m = 2q/(n(2 - q))` under uniformly distributed deaths, are in Preston, Heuveline & Guillot
  (2001) (from memory); they are not used here.
* ``m``: :math:`r_i = m_i`, the central rate taken as the constant force. This is exact when the force
  is constant within the band, and an approximation otherwise (Preston et al. 2001, from memory).

Conventions (documented choices)
--------------------------------
* **Open last band.** ``m`` tables: the last row's :math:`m` is the open band's rate. ``q`` tables: the
  table does not say how wide the last band is, so

  - :math:`q = 1` in the last row (the usual closing row, "everyone dies eventually") gives the open
    band the **last finite rate**, the rate of the band before it;
  - :math:`q < 1` in the last row is read over the width of the band before it (e.g. a one-year
    probability in a single-year table): :math:`r = -\\ln(1 - q)/n_{n-2}`.

  A ``q`` table therefore needs at least two rows, and :math:`q = 1` is allowed only in the last row.
  :meth:`LifeTable.conversion_note` states which case applied.
* **Tables starting above age 0.** :class:`~sim.hazards.PiecewiseConstant` starts at clock 0, so the
  band :math:`[0, x_0)` is given the first band's rate (an assumption the note reports). Survival
  conditional on reaching :math:`x_0` is unaffected.

Gompertz fits
-------------
:func:`fit_gompertz` fits :math:`h(a) = b e^{g a}` (plus :math:`c` for Gompertz-Makeham) to the band
rates by Poisson maximum likelihood or by weighted least squares on log rates (Tai & Noymer 2018).
The model's band rate is the band average of the hazard,
:math:`\\mu_i = \\frac{1}{n_i}\\int_{x_i}^{x_i + n_i} h(s)\\,ds`, which is what the constant-force rate
:math:`-\\ln(1 - q_i)/n_i` measures, so a table generated from the law itself is fitted exactly for any
band widths.

References
----------
.. [1] Preston SH, Heuveline P, Guillot M. Demography: Measuring and Modeling Population Processes.
   Oxford: Blackwell; 2001 (cited from memory).
.. [2] Tai TH, Noymer A. Models for estimating empirical Gompertz mortality: with an application to
   evolution of the Gompertzian slope. Popul Ecol 2018 (cited in docs/methods.md, 'Life tables and Gompertz fits').
.. [3] Finch CE, Pike MC, Witten M. Slow mortality rate accelerations during aging in some animals
   approximate that of humans. Science 1990;249:902-905.
"""

from .errors import LifeTableError
from .gompertz_fit import NOMINAL_EXPOSURE, GompertzFit, fit_gompertz
from .reading import read_life_table
from .table import KINDS, LifeTable

__all__ = [
    "KINDS",
    "NOMINAL_EXPOSURE",
    "GompertzFit",
    "LifeTable",
    "LifeTableError",
    "fit_gompertz",
    "read_life_table",
]

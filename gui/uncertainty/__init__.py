"""The window's side of parameter uncertainty: a parameter's distribution edited beside its field
("±"), parameters drawn together (a correlated group or shares, :mod:`.groups`), the probabilistic
analysis run off the GUI thread with progress and cancel, and its views (cost-effectiveness plane,
acceptability curves, EVPI, convergence). Everything computed comes from
``sim.uncertainty`` and ``sim.psa``; these modules only show it.

Modules are imported by their users (``gui.editors.fields`` imports :mod:`.button` early), so this
package's ``__init__`` imports nothing.
"""

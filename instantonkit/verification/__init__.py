"""Verdicts on a field: checks, the evidence behind them, the report.

Modules (floor 4 of the package; the floors inside are in DEVELOPERS.md):

* ``checks``: The one-call ``verify`` report: is a field what it claims to be, and how do we know?
* ``constituents``: Constituents of a caloron as ``verify`` shows them: the holonomy and fractions (inputs) and the action in balls.
* ``evidence``: Evidence for ``verify`` that does not take a field's closed forms on trust.
* ``report``: The report of ``verify``: its data (`Verification`, `Row`, `Route`) and its text.
"""

"""The evaluation engine: the field protocol and its hooks, evaluation, transformations of fields.

Modules (floor 1 of the package; the floors inside are in DEVELOPERS.md):

* ``fields``: The evaluation engine: a field and points in, float64/complex128 arrays out.
* ``gauges``: Gauge functions that record themselves: the constant gauge g(x) = g0.
* ``protocol``: The field protocol: what a field is, its optional hooks, and user callables seen as fields.
* ``transforms``: Gauge and space-time symmetry tools: fields wrapping fields (gauge, translation, rotation, dilation, parity).
* ``wrapping``: The wrapper base of ``transforms``: a field wrapping a field, and the forwarding of its hooks.
"""

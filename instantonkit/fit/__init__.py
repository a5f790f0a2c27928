"""Fits to densities: peaks, least squares, the exact-moduli fits, the finders.

Modules (floor 6 of the package; the floors inside are in DEVELOPERS.md):

* ``_lsq``: What the exact-moduli fits share: padded samples, the best-of-trials driver, the result record.
* ``finder``: Recover instanton positions and sizes from sampled action or charge densities by least squares.
* ``lattice_fit``: Instantons from link arrays: the colour rank of the links, their clover densities, then the finder.
* ``moduli_fit``: Fit exact SU(2) ADHM data (all gauge-invariant moduli) to sampled action densities by least squares.
* ``peaks``: Distinct peaks of sampled densities, robust to plateaus and ties (lumps between lattice sites), of one
* ``results``: The results of ``finder.find_instantons``: one sign (``InstantonFit``) or both (``MixedFit``).
* ``superposition``: The superposition model of the finder: a sum of BPST profiles fitted by least squares.
* ``unitary_fit``: Fit exact SU(N > 2) ADHM data (centres, sizes; orientations as nuisance parameters) to action densities.
"""

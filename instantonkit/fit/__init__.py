"""Fits to densities: peaks, least squares, the exact-moduli fits, the finders.

Modules (floor 6 of the package; the floors inside are in DEVELOPERS.md):

* ``_lsq``: What the exact-moduli fit builds on: padded samples, the best-of-trials driver, the result record.
* ``constituent_finder``: Constituents of calorons from sampled densities or from the links of a thermal lattice: positions and
* ``exact_fit``: Fit exact ADHM data to sampled action densities by least squares: one driver, one model per realisation.
* ``finder``: Recover instanton positions and sizes from sampled action or charge densities by least squares.
* ``lattice_fit``: Instantons from link arrays: the colour rank of the links, their clover densities, then the finder.
* ``peaks``: Distinct peaks of sampled densities, robust to plateaus and ties (lumps between lattice sites), of one
* ``results``: The results of ``finder.find_instantons``: one sign (``InstantonFit``) or both (``MixedFit``).
* ``superposition``: The superposition model of the finder: a sum of BPST profiles fitted by least squares.
"""

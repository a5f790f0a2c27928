"""The decay probe of the adaptive cubature: a density that falls too slowly at infinity has no estimable integral.

Before the first round `instantonkit.integrals.cubature` evaluates the density along fixed rays far
outside every lump; `check_decay` fits the power of its fall (``quadrature.decay_exponent``) and
refuses (``DivergentIntegralError``) a density falling slower than |x|^-(d + 3/4).
"""

from __future__ import annotations

import numpy as np

from . import quadrature as _quad
from .pieces import Layout
from .singular import DivergentIntegralError

#: Decay probe: radii PROBE_RADIUS x (field extent) x 2^j, j < PROBE_RADII, far outside every lump.
PROBE_RADIUS = 16.0
PROBE_RADII = 4
#: Decay probe: rays per radius, directions drawn with a fixed seed (the same probe on every run).
PROBE_RAYS = 8
PROBE_SEED = 12345
#: A density falling slower than |x|^-(d + _DECAY_MARGIN) is refused: its tail error is not estimable.
_DECAY_MARGIN = 0.75
#: ... and called divergent (rather than too slow) when it falls no faster than |x|^-(d + _DIVERGENCE_MARGIN).
_DIVERGENCE_MARGIN = 0.05
#: Values below this are zero for the decay probe (far below any density that matters, above denormals).
_PROBE_ZERO = 1e-290
#: The probed tail counts as rounding noise when |f| R^d x _PROBE_AREA <= _PROBE_NOISE x (integral so far).
_PROBE_AREA = 20.0
_PROBE_NOISE = 1e-15


# -- decay at infinity -----------------------------------------------------------------------------


def check_decay(name: str, values: np.ndarray, radii: np.ndarray, layout: Layout, magnitude: float) -> None:
    """Raise DivergentIntegralError when the probed density falls slower than |x|^-(d + _DECAY_MARGIN)."""
    dim = layout.dim
    p_exp = _quad.decay_exponent(values, radii, dim, magnitude, zero=_PROBE_ZERO, area=_PROBE_AREA, noise=_PROBE_NOISE)
    if p_exp is None or p_exp >= dim + _DECAY_MARGIN:
        return
    verdict = "diverges" if p_exp <= dim + _DIVERGENCE_MARGIN else "converges too slowly to estimate"
    raise DivergentIntegralError(
        f"the {name} density falls like |x|^-{p_exp:.2f} along rays at radii {radii[0]:.3g}..{radii[-1]:.3g} "
        f"about {np.round(layout.centres.mean(0), 6).tolist()}; its integral over "
        f"{'R^3 x S^1' if layout.periodic else 'R^4'} {verdict} (it needs a fall faster than |x|^-{dim + 1})"
    )

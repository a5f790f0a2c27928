"""instantonkit: exact Yang-Mills instantons (BPST, ADHM for SU(2) and Sp(n), classic ansaetze), their
densities by closed form and automatic differentiation, checks of charge and self-duality, and lattice
starts.  Conventions: :mod:`instantonkit.conventions` and docs/conventions.md.
"""

from . import _config  # noqa: F401  (float64 before anything is traced)
from . import conventions, quaternion
from .adhm import ADHMData, block_sum, bpst, embed_sp, multi_instanton, random_adhm
from .ansatz import anti, bpst_field, caloron, jnr, thooft
from .transforms import dilate, gauge_transform, parity, rotate, translate
from .zero_modes import zero_mode_density, zero_mode_overlap, zero_modes
from .finder import InstantonFit, find_instantons
from .fields import (
    action_density,
    as_field,
    charge_density,
    field_strength,
    potential,
    self_duality_residual,
)

__version__ = "0.1.0"

__all__ = [
    "conventions",
    "quaternion",
    "ADHMData",
    "bpst",
    "multi_instanton",
    "random_adhm",
    "embed_sp",
    "block_sum",
    "as_field",
    "potential",
    "field_strength",
    "action_density",
    "charge_density",
    "self_duality_residual",
    "thooft",
    "jnr",
    "caloron",
    "bpst_field",
    "anti",
    "gauge_transform",
    "translate",
    "rotate",
    "dilate",
    "parity",
    "zero_modes",
    "zero_mode_density",
    "zero_mode_overlap",
    "find_instantons",
    "InstantonFit",
]

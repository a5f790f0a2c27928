"""instantonkit: exact Yang-Mills instantons (BPST, ADHM for SU(2) and Sp(n), classic ansaetze), their
densities by closed form and automatic differentiation, checks of charge and self-duality, and lattice
starts.  Conventions: :mod:`instantonkit.conventions` and docs/conventions.md.
"""

from . import (
    _config,  # noqa: F401  (float64 before anything is traced)
    cluster,  # dask and zarr are imported only when a chunked run starts
    conventions,
    io,
    lattice,
    moduli,
    observables,
    quaternion,
    references,
    smoothing,
    transport,
    unitary_adhm,
    unitary_moduli,
)
from ._config import enable_compile_cache, set_lean_compile
from ._links import check_links, project_links
from .adhm import ADHMData
from .ansatz import bpst_field, caloron, jnr, thooft
from .checks import (
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Verification,
    total_action,
    total_charge,
    verify,
)
from .cluster import ensemble
from .fields import (
    ParametrisedField,
    action_density,
    as_field,
    charge_density,
    field_strength,
    potential,
    self_duality_residual,
)
from .finder import InstantonFit, MixedFit, find_instantons
from .io import load_lattice, save_lattice
from .lattice import average_plaquette, clover_charge, lattice_links, lattice_start, wilson_action
from .lattice_fit import ColourRank, colour_rank, find_lattice_instantons
from .moduli import block_sum, bpst, embed_sp, multi_instanton, random_adhm
from .smoothing import cool, gradient_flow, improved_action, improved_charge, wilson_flow
from .transforms import anti, dilate, gauge_transform, parity, rotate, translate
from .unitary_adhm import UnitaryADHMData
from .unitary_moduli import embed_unitary, from_quaternionic, random_unitary_adhm, unitary_multi_instanton
from .zero_modes import zero_mode_density, zero_mode_overlap, zero_modes

__version__ = "0.1.0"


def __getattr__(name):
    """Lazy submodules: ``instantonkit.plot`` imports matplotlib only when first used."""
    if name == "plot":
        import importlib

        return importlib.import_module(".plot", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "conventions",
    "quaternion",
    "moduli",
    "transport",
    "references",
    "lattice",
    "observables",
    "io",
    "cluster",
    "ensemble",
    "lattice_links",
    "lattice_start",
    "average_plaquette",
    "wilson_action",
    "clover_charge",
    "save_lattice",
    "load_lattice",
    "check_links",
    "project_links",
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
    "find_lattice_instantons",
    "colour_rank",
    "ColourRank",
    "InstantonFit",
    "MixedFit",
    "ParametrisedField",
    "enable_compile_cache",
    "set_lean_compile",
    "total_action",
    "total_charge",
    "verify",
    "IntegralResult",
    "Verification",
    "DivergentIntegralError",
    "FieldEvaluationError",
    "smoothing",
    "wilson_flow",
    "gradient_flow",
    "cool",
    "improved_action",
    "improved_charge",
    "unitary_adhm",
    "unitary_moduli",
    "UnitaryADHMData",
    "unitary_multi_instanton",
    "random_unitary_adhm",
    "from_quaternionic",
    "embed_unitary",
]

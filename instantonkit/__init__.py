"""instantonkit: exact Yang-Mills instantons (BPST, ADHM for SU(2) and Sp(n), classic ansaetze), their
densities by closed form and automatic differentiation, checks of charge and self-duality, and lattice
starts.  Conventions: :mod:`instantonkit.conventions` and docs/conventions.md.
"""

from . import _config  # noqa: F401  (float64 before anything is traced)
from . import conventions, quaternion
from .adhm import ADHMData, block_sum, bpst, embed_sp, multi_instanton, random_adhm
from . import unitary_adhm
from .unitary_adhm import (
    UnitaryADHMData,
    embed_unitary,
    from_quaternionic,
    random_unitary_adhm,
    unitary_multi_instanton,
)
from .ansatz import anti, bpst_field, caloron, jnr, thooft
from .transforms import dilate, gauge_transform, parity, rotate, translate
from .zero_modes import zero_mode_density, zero_mode_overlap, zero_modes
from .finder import InstantonFit, find_instantons
from .checks import (
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Verification,
    total_action,
    total_charge,
    verify,
)
from . import io, lattice, observables
from .lattice import average_plaquette, clover_charge, lattice_links, wilson_action
from .io import load_lattice, save_lattice
from . import cluster  # dask and zarr are imported only when a chunked run starts
from .cluster import ensemble
from .fields import (
    action_density,
    as_field,
    charge_density,
    field_strength,
    potential,
    self_duality_residual,
)

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
    "lattice",
    "observables",
    "io",
    "cluster",
    "ensemble",
    "lattice_links",
    "average_plaquette",
    "wilson_action",
    "clover_charge",
    "save_lattice",
    "load_lattice",
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
    "total_action",
    "total_charge",
    "verify",
    "IntegralResult",
    "Verification",
    "DivergentIntegralError",
    "FieldEvaluationError",
    "unitary_adhm",
    "UnitaryADHMData",
    "unitary_multi_instanton",
    "random_unitary_adhm",
    "from_quaternionic",
    "embed_unitary",
]

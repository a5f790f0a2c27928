"""instantonkit: exact Yang-Mills instantons (BPST, ADHM for SU(2) and Sp(n), classic ansaetze), their
densities by closed form and automatic differentiation, checks of charge and self-duality, and lattice
starts.  Conventions: `instantonkit.core.conventions` and docs/conventions.md.
"""

import sys as _sys
from importlib import import_module as _import_module

from .core import _config  # noqa: F401, I001  (float64 before anything is traced)

# isort: split

from . import cluster, lattice
from .adhm import moduli, unitary_moduli
from .adhm import unitary as unitary_adhm
from .adhm.metric import (
    GeodesicPath,
    MetricResult,
    StandardChart,
    moduli_geodesic,
    moduli_measure,
    moduli_metric,
    tangent_basis,
)
from .adhm.moduli import block_sum, bpst, embed_sp, multi_instanton, random_adhm
from .adhm.quaternionic import ADHMData
from .adhm.tangent import bosonic_zero_modes, global_gauge_directions
from .adhm.unitary import UnitaryADHMData
from .adhm.unitary_moduli import embed_unitary, from_quaternionic, random_unitary_adhm, unitary_multi_instanton
from .adhm.zero_modes import zero_mode_density, zero_mode_overlap, zero_modes
from .ansatz.classic import bpst_field, caloron, jnr, thooft
from .ansatz.mixture_totals import MixtureTotals, mixture_totals
from .ansatz.mixtures import (
    Mixture,
    OverlapWarning,
    instanton_pair,
    mixture,
    random_mixture,
    ratio_ansatz,
    torus_mixture,
)
from .ansatz.twisted import constant_flux
from .cluster import ensemble
from .core import conventions, quaternion
from .core._config import enable_compile_cache, set_lean_compile
from .core._links import check_links, project_links
from .engine.fields import (
    ParametrisedField,
    action_density,
    as_field,
    charge_density,
    field_strength,
    potential,
    self_duality_residual,
)
from .engine.transforms import anti, dilate, gauge_transform, parity, rotate, translate
from .fit.constituent_finder import ConstituentFit, find_constituents, find_lattice_constituents
from .fit.finder import InstantonFit, MixedFit, find_instantons
from .fit.lattice_fit import ColourRank, colour_rank, find_lattice_instantons
from .lattice import files as io
from .lattice import observables, references, smoothing, transport
from .lattice.files import load_lattice, save_lattice
from .lattice.operators import OPERATOR_PRESETS, loop_operator, operator_action, operator_charge
from .lattice.polyakov import lattice_polyakov_loop, polyakov_average, polyakov_loop, polyakov_phases
from .lattice.scan import operator_scan
from .lattice.smoothing import cool, gradient_flow, improved_action, improved_charge, wilson_flow
from .lattice.starts import average_plaquette, clover_charge, lattice_links, lattice_start, wilson_action
from .lattice.thermal import thermal_spacings
from .lattice.twist import constant_flux_links, twisted_clover_charge, twisted_wilson_action
from .lattice.twisted_flow import twisted_cool, twisted_flow
from .lattice.twisted_operators import twisted_operator_action, twisted_operator_charge
from .verification.checks import (
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Verification,
    total_action,
    total_charge,
    verify,
)
from .verification.constituents import ball_fractions

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
    "polyakov_loop",
    "lattice_polyakov_loop",
    "polyakov_average",
    "polyakov_phases",
    "thermal_spacings",
    "ball_fractions",
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
    "mixture",
    "torus_mixture",
    "random_mixture",
    "instanton_pair",
    "ratio_ansatz",
    "mixture_totals",
    "Mixture",
    "MixtureTotals",
    "OverlapWarning",
    "anti",
    "gauge_transform",
    "translate",
    "rotate",
    "dilate",
    "parity",
    "zero_modes",
    "zero_mode_density",
    "zero_mode_overlap",
    "bosonic_zero_modes",
    "global_gauge_directions",
    "tangent_basis",
    "moduli_metric",
    "moduli_measure",
    "moduli_geodesic",
    "StandardChart",
    "MetricResult",
    "GeodesicPath",
    "find_instantons",
    "find_lattice_instantons",
    "find_constituents",
    "find_lattice_constituents",
    "ConstituentFit",
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
    "OPERATOR_PRESETS",
    "loop_operator",
    "operator_action",
    "operator_charge",
    "operator_scan",
    "unitary_adhm",
    "unitary_moduli",
    "UnitaryADHMData",
    "unitary_multi_instanton",
    "random_unitary_adhm",
    "from_quaternionic",
    "embed_unitary",
    "constant_flux",
    "constant_flux_links",
    "twisted_wilson_action",
    "twisted_clover_charge",
    "twisted_flow",
    "twisted_cool",
    "twisted_operator_action",
    "twisted_operator_charge",
]


# -- the flat layout's module paths: ``instantonkit.<old>`` keeps working (imports and attributes) ------------------
#: old module name -> where the module lives now (the folders adhm, ansatz, integrals and lattice keep
#: their old names themselves and re-export the modules they replaced).
_MOVED = {
    "_atomic": "core._atomic",
    "_batching": "core._batching",
    "_config": "core._config",
    "_kxk": "adhm._kxk",
    "_links": "core._links",
    "_lsq": "fit._lsq",
    "_progress": "core._progress",
    "_pytree": "core._pytree",
    "_validate": "core._validate",
    "adhm_base": "adhm.base",
    "adhm_kernels": "adhm.kernels",
    "boundaries": "lattice.boundaries",
    "checks": "verification.checks",
    "conventions": "core.conventions",
    "cubature": "integrals.cubature",
    "evidence": "verification.evidence",
    "field_protocol": "engine.protocol",
    "fields": "engine.fields",
    "finder": "fit.finder",
    "fit.moduli_fit": "fit.exact_fit",  # the two exact fits are one module now
    "fit.unitary_fit": "fit.exact_fit",
    "flux": "integrals.flux",
    "io": "lattice.files",
    "lattice_fit": "fit.lattice_fit",
    "moduli": "adhm.moduli",
    "moduli_fit": "fit.exact_fit",
    "observables": "lattice.observables",
    "peaks": "fit.peaks",
    "periodic": "ansatz.periodic",
    "quadrature": "integrals.quadrature",
    "quaternion": "core.quaternion",
    "references": "lattice.references",
    "report": "verification.report",
    "singular": "integrals.singular",
    "smoothing": "lattice.smoothing",
    "transforms": "engine.transforms",
    "transport": "lattice.transport",
    "unitary_adhm": "adhm.unitary",
    "unitary_fit": "fit.exact_fit",
    "unitary_moduli": "adhm.unitary_moduli",
    "zero_mode_phase": "adhm.zero_mode_phase",
    "zero_modes": "adhm.zero_modes",
}
for _old, _new in _MOVED.items():
    _sys.modules[f"{__name__}.{_old}"] = _module = _import_module(f".{_new}", __name__)
    _home, _, _leaf = f"{__name__}.{_old}".rpartition(".")
    vars(_sys.modules[_home]).setdefault(_leaf, _module)  # a public name of the same spelling (zero_modes) wins

"""Switch JAX to float64 before anything is traced (conventions: float64 everywhere by default).

Importing any part of instantonkit imports this module first (through the package ``__init__``), so
users never have to configure JAX themselves.
"""

import jax

jax.config.update("jax_enable_x64", True)

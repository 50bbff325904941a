"""solitons: relax knotted solitons of corrected sigma models on a 3D lattice."""

import jax

jax.config.update("jax_enable_x64", True)

__version__ = "0.1.0"

"""Energy and gradient with the grid sharded over several jax devices (jax.sharding).

The field is split along x over a one-dimensional device mesh; the jitted jax route of
`solitons.model.energy.Model` then compiles the neighbour shifts into exchanges between devices
(GSPMD), so nothing else changes.  On one machine, several CPU devices come from
``XLA_FLAGS=--xla_force_host_platform_device_count=N`` set before jax starts.  (The numba
kernel is a single-host route and is not sharded.)
"""

from __future__ import annotations

import jax
import numpy as np
from jax.sharding import Mesh, NamedSharding, PartitionSpec


def device_mesh(devices=None) -> Mesh:
    devices = jax.devices() if devices is None else devices
    return Mesh(np.asarray(devices), ("x",))


def shard_field(field, mesh: Mesh):
    """Place a (Nx, Ny, Nz, 3) field on the mesh, split along x (Nx divisible by the
    number of devices)."""
    count = mesh.devices.size
    if field.shape[0] % count:
        raise ValueError(f"Nx = {field.shape[0]} is not divisible by the {count} devices")
    return jax.device_put(field, NamedSharding(mesh, PartitionSpec("x")))

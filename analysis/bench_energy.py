"""Cost of one jitted value_and_grad against the memory-bandwidth floor.

For each grid size and precision: median wall time of one evaluation (after warm-up),
nanoseconds per grid point, and the ratio to the floor set by reading the field and
writing the gradient once (2 x 3 values per point) at the copy bandwidth measured in the
same run with numpy.  Default model (dirichlet + skyrme_faddeev, second-order scheme) at
N = 64, 96, 128 on both routes (the fused numba kernel and jax autodiff), the fourth- and
sixth-order schemes at 128, and every built-in term alone at N = 64 (jax; the kernel covers only the
default model's two terms).  The kernel's work arrays are a padded component-major copy
of the field (3 values per site), the density (1) and, per thread, a ring of nine
planes of the 18 derivatives (a few MB): with the gradient (3) about 7 values, 56 bytes
per site in float64.

    python analysis/bench_energy.py > analysis/bench_energy.txt
"""

from __future__ import annotations

import statistics
import time

import jax
import jax.numpy as jnp
import numpy as np

import solitons  # noqa: F401  (float64 on)
from solitons.energy import Model
from solitons.grid import Grid
from solitons.initial import add_noise, hopf_map
from solitons.terms import BUILTIN_TERMS, Term


def copy_bandwidth(megabytes: int = 512, repeats: int = 5) -> float:
    """Bytes per second of a large numpy copy (read + write counted)."""
    source = np.ones(megabytes * 2**20 // 8)
    target = np.empty_like(source)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        np.copyto(target, source)
        times.append(time.perf_counter() - start)
    return 2 * source.nbytes / min(times)


def time_evaluation(model: Model, field, repeats: int = 5) -> float:
    """Median seconds of one value_and_grad: Model.evaluate on the kernel route (as the
    L-BFGS loop calls it), the jitted jax function otherwise."""
    if model.uses_kernel:
        field = np.asarray(field)
        out = np.empty_like(field)

        def run():
            model.evaluate(field, out)
    else:
        def run():
            model.value_and_grad(field)[1].block_until_ready()
    run()  # compile and warm up
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    bandwidth = copy_bandwidth()
    print(f"copy bandwidth {bandwidth / 1e9:.1f} GB/s; jax {jax.__version__}, devices {jax.devices()}")
    print("model               route   scheme    N  dtype     ms/eval   ns/point  ratio to bandwidth floor")
    default = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
               Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    cases = [("default", default, n, backend, "second") for n in (64, 96, 128) for backend in ("numba", "jax")]
    cases += [("default", default, 128, backend, scheme) for scheme in ("fourth", "sixth")
              for backend in ("numba", "jax")]
    cases += [(name, (Term(name, kind),), 64, "jax", "second") for name, kind in BUILTIN_TERMS.items()]
    for label, terms, points, backend, scheme in cases:
        grid = Grid.centred(points, 8.0 / points, "fixed")
        model = Model(terms, grid, scheme, backend)
        base = add_noise(hopf_map(grid, 1.0), grid, 0.01, 0)
        for dtype in (jnp.float64, jnp.float32):
            field = jnp.asarray(base, dtype=dtype)
            seconds = time_evaluation(model, field)
            per_point = seconds / grid.npoints
            floor = 6 * jnp.dtype(dtype).itemsize / bandwidth
            print(f"{label:18s} {backend:6s}  {scheme:7s} {points:4d}  {jnp.dtype(dtype).name:8s} {1e3 * seconds:9.1f} "
                  f"{1e9 * per_point:9.0f}  {per_point / floor:8.0f}", flush=True)


if __name__ == "__main__":
    main()

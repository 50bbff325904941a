"""Cost of one jitted value_and_grad against the memory-bandwidth floor.

For each grid size and precision: median wall time of one evaluation (after warm-up),
nanoseconds per grid point, and the ratio to the floor set by reading the field and
writing the gradient once (2 x 3 values per point) at the copy bandwidth measured in the
same run with numpy.  Default model (dirichlet + skyrme_faddeev, second-order scheme) at
N = 64, 96, 128 on both routes (the fused numba kernel and jax autodiff), the fourth- and
sixth-order schemes at 128; then, on the default sixth-order scheme at N = 64, 96, 128,
the default model plus each built-in correction (coupling 0.1), plus all seven, and plus
user-file copies of log_quartic and sextic, on the numba routes (the staged kernel; the
user terms compiled pointwise, `solitons.model.routes.pointwise`), with the ratio to the default kernel
at the same N and precision ("/default", the two timed alternately, seven times each, every timed call right after an
untimed one of its own, and the medians divided, so that both see the same state of the machine); the user copies at N = 64 also on the jax
pointwise evaluator (the route before the compiled one, still the fallback); and each
correction on the jax autodiff route at N = 64.  The kernel's work arrays are a padded component-major copy
of the field (3 values per site), the density (1) and, per thread, a ring of nine
planes of the 18 derivatives (a few MB): with the gradient (3) about 7 values, 56 bytes
per site in float64.

    python analysis/bench_energy.py > analysis/bench_energy.txt
    python analysis/bench_energy.py --corrections > analysis/bench_corrections.txt
"""

from __future__ import annotations

import statistics
import time

import jax
import jax.numpy as jnp
import numpy as np

import solitons  # noqa: F401  (float64 on)
from solitons.lattice.grid import Grid
from solitons.model.energy import Model
from solitons.model.routes import pointwise
from solitons.model.terms import BUILTIN_TERMS, Term
from solitons.relaxation.initial import add_noise, hopf_map


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


def evaluation(model: Model, field):
    """One value_and_grad, warmed up: Model.evaluate on the kernel route (as the L-BFGS
    loop calls it), the jitted jax function otherwise."""
    if model.uses_kernel:
        field = np.asarray(field)
        out = np.empty_like(field)

        def run():
            model.evaluate(field, out)
    else:
        def run():
            model.value_and_grad(field)[1].block_until_ready()
    run()  # compile and warm up
    return run


def seconds_of(run) -> float:
    start = time.perf_counter()
    run()
    return time.perf_counter() - start


def time_evaluation(model: Model, field, repeats: int = 5) -> float:
    """Median seconds of one value_and_grad."""
    run = evaluation(model, field)
    return statistics.median(seconds_of(run) for _ in range(repeats))


def time_against(run, reference, repeats: int = 7) -> tuple[float, float]:
    """Median seconds of ``run`` and of ``reference`` timed alternately, so that the ratio
    of the two comes from one window of the machine's state (drifts of the clock or of
    other tenants hit both alike)."""
    mine, theirs = [], []
    for _ in range(repeats):
        reference()  # untimed: each timed call follows one of its own kind (warm caches and threads;
        theirs.append(seconds_of(reference))  # timing right after the other model read the default 10-80 % slow)
        run()
        mine.append(seconds_of(run))
    return statistics.median(mine), statistics.median(theirs)


CORRECTIONS = ("dirichlet_squared", "strain_squared", "potential", "laplacian_squared", "sextic", "chiral",
               "log_quartic")


def main() -> None:
    import sys
    from pathlib import Path

    from solitons.model.userterms import load_user_term

    bandwidth = copy_bandwidth()
    print(f"copy bandwidth {bandwidth / 1e9:.1f} GB/s; jax {jax.__version__}, devices {jax.devices()}")
    print("model                      route   scheme    N  dtype     ms/eval   ns/point  /default  /floor")
    default = (Term("dirichlet", BUILTIN_TERMS["dirichlet"]),
               Term("skyrme_faddeev", BUILTIN_TERMS["skyrme_faddeev"]))
    copies = Path(__file__).parents[1] / "tests" / "user_copies.py"  # user-file copies of two built-in terms
    user = {name: load_user_term(copies, name)[0] for name in ("log_quartic", "sextic")}

    def plus(name, kind=None, coupling=0.1):
        return default + (Term(name, kind or BUILTIN_TERMS[name], coupling),)

    everything = default + tuple(Term(k, BUILTIN_TERMS[k], 0.1) for k in CORRECTIONS)
    cases = [("default", default, n, backend, "second", dtypes) for n in (64, 96, 128) for backend in ("numba", "jax")
             for dtypes in [(jnp.float64, jnp.float32)]]
    cases += [("default", default, 128, backend, scheme, (jnp.float64, jnp.float32)) for scheme in ("fourth", "sixth")
              for backend in ("numba", "jax")]
    # corrections on the numba routes against the default kernel, default (sixth-order) scheme
    start_of_corrections = len(cases)
    for n in (64, 96, 128):
        dtypes = (jnp.float64, jnp.float32) if n == 128 else (jnp.float64,)
        cases.append(("default", default, n, "numba", "sixth", dtypes))
        cases += [(f"+ {name}", plus(name), n, "numba", "sixth", dtypes) for name in CORRECTIONS]
        cases.append(("+ all seven", everything, n, "numba", "sixth", dtypes))
        cases += [(f"+ user {name}", plus(name, user[name]), n, "numba", "sixth", dtypes) for name in user]
    # the jax pointwise evaluator for the user copies (64 only: slow)
    cases += [(f"+ user {name} (jax pw)", plus(name, user[name]), 64, "numba", "sixth", (jnp.float64,))
              for name in user]
    # the jax autodiff route for each correction (64 only: slow)
    cases += [(f"+ {name}", plus(name), 64, "jax", "sixth", (jnp.float64,)) for name in CORRECTIONS]
    corrections_only = "--corrections" in sys.argv
    if corrections_only:  # the rows of the staged route and their jax counterparts only
        cases = cases[start_of_corrections:]
    only = [a for a in sys.argv[1:] if not a.startswith("--")]  # optional filter: labels to run
    reference = {}
    for label, terms, points, backend, scheme, dtypes in cases:
        if only and label not in only and label != "default":
            continue
        grid = Grid.centred(points, 8.0 / points, "fixed")
        model = Model(terms, grid, scheme, backend)
        if label.endswith("(jax pw)"):
            model.route._evaluator, model.route._note = pointwise.build(model.route.rest, model.route.needs_laplacian,
                                                                        compiled=False)
        base = add_noise(hopf_map(grid, 1.0), grid, 0.01, 0)
        for dtype in dtypes:
            field = jnp.asarray(base, dtype=dtype)
            key = (points, scheme, jnp.dtype(dtype).name)
            if label == "default" and backend == "numba":
                reference[key] = evaluation(model, field)
                seconds = time_evaluation(model, field)
                ratio_value = 1.0
            elif key in reference:  # timed alternately with the default kernel: the ratio from one window
                seconds, default_seconds = time_against(evaluation(model, field), reference[key])
                ratio_value = seconds / default_seconds
            else:
                seconds, ratio_value = time_evaluation(model, field), None
            per_point = seconds / grid.npoints
            floor = 6 * jnp.dtype(dtype).itemsize / bandwidth
            ratio = f"{ratio_value:8.2f}" if ratio_value is not None else "       -"
            route = "numba" if model.uses_kernel else "jax"
            print(f"{label:26s} {route:6s}  {scheme:7s} {points:4d}  {jnp.dtype(dtype).name:8s} {1e3 * seconds:9.1f} "
                  f"{1e9 * per_point:9.0f}  {ratio}  {per_point / floor:6.0f}", flush=True)


if __name__ == "__main__":
    main()

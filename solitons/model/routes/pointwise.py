"""Pointwise evaluation of the terms the staged kernel has no row function for (user terms,
a second term of a kind already taken): per site, the eight-octant average of their
density (`solitons.model.reference.octant_average`) and its derivatives with respect to the staged
local fields of `solitons.model.routes.staged` (rows: forward and backward differences per axis, n, the
Laplacian).

Two implementations, with the same outputs (`PointwiseResult`):

- `CompiledPointwise`: jax traces the density and its gradient for one site;
  `solitons.model.routes.scalar_codegen` turns the trace into scalar statements; they are written, with
  a site loop around them, to a Python file in the cache directory and compiled by numba
  (cached on disk, keyed by the source text, so a second run or a coupling scan compiles
  nothing).  Couplings and term parameters are arguments of the compiled code, not
  constants in it.
- `XlaPointwise`: jax value_and_grad over chunks of sites, the fallback when the density
  uses a primitive the translator does not handle.

Row layout of the staged local fields (see `solitons.model.routes.staged`): forward differences of
axis a in rows 6a..6a+2, backward ones in 6a+3..6a+5, n in 18..20, the Laplacian in
21..23 and its scaling parts for the virial in 24 + 3a..26 + 3a.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import sys
import tempfile
from functools import partial
from pathlib import Path
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from solitons.model.routes import scalar_codegen


class PointwiseResult(NamedTuple):
    energies: np.ndarray  # (T,) per term: sum over sites of weight * coupling * density
    density: np.ndarray  # (Nx, Ny, Nz): sum over terms of coupling * density (unweighted)
    q: np.ndarray  # (3,) Q_a: sum of der * (local fields scaled like 1 / h_a)
    der: np.ndarray  # (rows, Nx, Ny, Nz): derivatives of the weighted density sum


def cache_directory() -> Path:
    """Where generated kernels live: $SOLITONS_CACHE_DIR, else ~/.cache/solitons, else the
    temporary directory (when the home directory is not writable)."""
    for candidate in (os.environ.get("SOLITONS_CACHE_DIR"), Path.home() / ".cache" / "solitons",
                      Path(tempfile.gettempdir()) / "solitons-cache"):
        if not candidate:
            continue
        path = Path(candidate) / "pointwise"
        try:
            path.mkdir(parents=True, exist_ok=True)
            probe = path / f".probe-{os.getpid()}"
            probe.write_text("")
            probe.unlink()
            return path
        except OSError:
            continue
    raise OSError("no writable cache directory for compiled kernels (set SOLITONS_CACHE_DIR)")


# ---- the per-site function that is translated ----

def _parameter_layout(terms, traced):
    """Per term: (names, offset into the parameter vector), and the vector itself."""
    layout, values = [], []
    for term in terms:
        names = tuple(term.parameter_values()) if traced else ()
        layout.append((names, len(values)))
        values.extend(float(term.parameter_values()[k]) for k in names)
    return layout, np.asarray(values or [0.0])


def site_function(terms, needs_laplacian, traced_parameters=True):
    """f(n (3,), d (3, 3), lap (3,), couplings (T,), parameters (P,)) -> (values (T,),
    dE/dn, dE/dd, dE/dlap) for one octant, E = sum_t values_t = sum_t c_t density_t."""
    layout, _ = _parameter_layout(terms, traced_parameters)

    def energy(n, d, lap, couplings, parameters):
        values = []
        for t, term in enumerate(terms):
            names, offset = layout[t]
            kwargs = ({k: parameters[offset + i] for i, k in enumerate(names)} if traced_parameters
                      else term.parameter_values())
            rho = term.kind.density(n[None], d[None], lap[None] if needs_laplacian else None, **kwargs)
            values.append(couplings[t] * jnp.sum(rho))
        values = jnp.stack(values)
        return jnp.sum(values), values

    def site(n, d, lap, couplings, parameters):
        (_, values), grads = jax.value_and_grad(energy, argnums=(0, 1, 2), has_aux=True)(n, d, lap, couplings,
                                                                                         parameters)
        return (values,) + tuple(grads)

    return site


# ---- source generation ----

_AXES = "xyz"
# LLVM's fast-math flags of the hand-written kernels (reassociation, contraction; NaN and
# Inf keep their meaning): a third of the time of strict IEEE order on the user copy of
# log_quartic, with results within 1e-15 relative of it
FASTMATH = {"nsz", "arcp", "contract", "afn", "reassoc"}


def _names(prefix, shape):
    names = np.empty(shape, dtype=object)
    for index in np.ndindex(shape):
        names[index] = prefix + "".join(str(i) for i in index)
    return names


def site_source(terms, needs_laplacian):
    """Source of ``site(n0, n1, n2, d00, ..., d22, l0, l1, l2, c, p)`` returning the tuple
    (values..., dn..., dd..., dlap...), and whether the parameters are arguments (False when
    the density needs them as Python numbers, e.g. for a branch: then they are constants)."""
    count = len(terms)
    for traced in (True, False):
        _, parameters = _parameter_layout(terms, traced)
        function = site_function(terms, needs_laplacian, traced)
        example = (np.ones(3), np.ones((3, 3)), np.ones(3), np.ones(count), parameters)
        names = [_names("n", (3,)), _names("d", (3, 3)), _names("l", (3,)),
                 np.asarray([f"c[{t}]" for t in range(count)], dtype=object),
                 np.asarray([f"p[{k}]" for k in range(len(parameters))], dtype=object)]
        try:
            lines, outs = scalar_codegen.translate(function, example, names)
        except jax.errors.ConcretizationTypeError:
            if not traced:
                raise
            continue
        break
    arguments = ", ".join(list(names[0]) + list(names[1].ravel()) + list(names[2]) + ["c", "p"])
    results = [str(e) for out in outs for e in np.asarray(out).ravel()]
    body = "\n".join("    " + line for line in lines)
    return (f"def site({arguments}):\n{body}\n    return ({', '.join(results)},)\n", traced)


def kernel_source(terms, needs_laplacian):
    """The whole module: ``site`` and the parallel site loop ``kernel``."""
    count = len(terms)
    site, traced = site_source(terms, needs_laplacian)
    rows = 24 if needs_laplacian else 21
    load = ["n0 = float(loc[18, i, j, k])", "n1 = float(loc[19, i, j, k])", "n2 = float(loc[20, i, j, k])"]
    for a, axis in enumerate(_AXES):
        for c in range(3):
            load.append(f"f{axis}{c} = float(loc[{6 * a + c}, i, j, k])")
            load.append(f"b{axis}{c} = float(loc[{6 * a + 3 + c}, i, j, k])")
    for c in range(3):
        load.append(f"l{c} = float(loc[{21 + c}, i, j, k])" if needs_laplacian else f"l{c} = 0.0")
    accumulators = [f"e{t}" for t in range(count)] + [f"an{c}" for c in range(3)] + [
        f"a{s}{axis}{c}" for axis in _AXES for s in "fb" for c in range(3)] + [f"al{c}" for c in range(3)]
    body = load + [f"{name} = 0.0" for name in accumulators]
    for sx in "fb":
        for sy in "fb":
            for sz in "fb":
                sides = {"x": sx, "y": sy, "z": sz}
                args = ["n0", "n1", "n2"] + [f"{sides[axis]}{axis}{c}" for axis in _AXES for c in range(3)]
                body.append(f"r = site({', '.join(args + ['l0', 'l1', 'l2', 'c', 'p'])})")
                for t in range(count):
                    body.append(f"e{t} += r[{t}]")
                for c in range(3):
                    body.append(f"an{c} += r[{count + c}]")
                for a, axis in enumerate(_AXES):
                    for c in range(3):
                        body.append(f"a{sides[axis]}{axis}{c} += r[{count + 3 + 3 * a + c}]")
                for c in range(3):
                    body.append(f"al{c} += r[{count + 12 + c}]")
    body.append("s = 0.125 * (weights[i, j, k] if weighted else 1.0)")
    stores = {}
    for a, axis in enumerate(_AXES):
        for c in range(3):
            stores[6 * a + c] = f"af{axis}{c}"
            stores[6 * a + 3 + c] = f"ab{axis}{c}"
    for c in range(3):
        stores[18 + c] = f"an{c}"
        if needs_laplacian:
            stores[21 + c] = f"al{c}"
    for row in range(rows):
        body.append(f"der[{row}, i, j, k] = {stores[row]} * s")
    body.append("total = 0.0")
    for t in range(count):
        body.append(f"total += e{t}")
        body.append(f"esum[i, {t}] += s * e{t}")
    body.append("density[i, j, k] = 0.125 * total")
    for a, axis in enumerate(_AXES):
        parts = [f"{stores[6 * a + c]} * loc[{6 * a + c}, i, j, k]" for c in range(6)]
        if needs_laplacian:
            parts += [f"al{c} * loc[{24 + 3 * a + c}, i, j, k]" for c in range(3)]
        body.append(f"qsum[i, {a}] += s * ({' + '.join(parts)})")
    loop = "\n".join(" " * 16 + line for line in body)
    return f'''"""Generated by solitons.model.routes.pointwise for the kinds {", ".join(t.kind.name for t in terms)}
(parameters {"passed in" if traced else "fixed"}).  Do not edit: the file name is the hash
of this text."""

import math

import numba as nb
import numpy as np

FAST = set({sorted(FASTMATH)!r})


@nb.njit(error_model="numpy", cache=True, fastmath=FAST)
{site}

@nb.njit(parallel=True, error_model="numpy", cache=True, fastmath=FAST)
def kernel(loc, weights, weighted, c, p, der, density, esum, qsum):
    nx, ny, nz = loc.shape[1], loc.shape[2], loc.shape[3]
    for i in nb.prange(nx):
        for j in range(ny):
            for k in range(nz):
{loop}
''', traced


def _load(source: str):
    """Write ``source`` to the cache directory under its hash (atomically) and import it."""
    digest = hashlib.sha256(source.encode()).hexdigest()[:24]
    path = cache_directory() / f"site_{digest}.py"
    if not path.is_file() or path.read_text() != source:
        with tempfile.NamedTemporaryFile("w", dir=path.parent, suffix=".tmp", delete=False) as handle:
            handle.write(source)
        os.replace(handle.name, path)
    name = f"solitons_pointwise_{digest}"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    sys.modules[name] = module
    return module


_SOURCES: dict = {}


def _cached_source(terms, needs_laplacian):
    """`kernel_source`, once per set of kinds and parameter values (couplings are
    arguments: a coupling scan traces once)."""
    key = (tuple((t.kind, tuple(sorted(t.parameter_values().items()))) for t in terms), needs_laplacian)
    if key not in _SOURCES:
        _SOURCES[key] = kernel_source(terms, needs_laplacian)
    return _SOURCES[key]


class CompiledPointwise:
    """The generated numba kernel for a tuple of terms (raises
    `scalar_codegen.Unsupported` when the densities cannot be translated)."""

    def __init__(self, terms, needs_laplacian):
        self.terms = tuple(terms)
        self.needs_laplacian = needs_laplacian
        source, traced = _cached_source(self.terms, needs_laplacian)
        self.module = _load(source)
        self.couplings = np.asarray([t.coupling for t in self.terms], dtype=np.float64)
        self.parameters = _parameter_layout(self.terms, traced)[1]

    def __call__(self, loc, weights=None) -> PointwiseResult:
        shape = loc.shape[1:]
        rows = 24 if self.needs_laplacian else 21
        der = np.empty((rows,) + shape, dtype=loc.dtype)
        density = np.empty(shape)
        esum = np.zeros((shape[0], len(self.terms)))
        qsum = np.zeros((shape[0], 3))
        weighted = weights is not None
        w = np.ascontiguousarray(weights, dtype=np.float64) if weighted else np.ones((1, 1, 1))
        self.module.kernel(loc, w, weighted, self.couplings, self.parameters, der, density, esum, qsum)
        return PointwiseResult(esum.sum(axis=0), density, qsum.sum(axis=0), der)


# ---- fallback: jax over chunks of sites ----

# XLA on the CPU materialises every intermediate of a large elementwise graph: on the
# whole grid a user copy of log_quartic took 3400 ns per site at 64^3, in chunks of a few
# thousand sites (lax.map, intermediates in cache) 1600 ns; one chunk sequence per core,
# run from threads (jax releases the GIL), divides that by the core count.
POINTWISE_CHUNK = 2048


def _chunk_pieces(terms, needs_laplacian, loc, weights):
    """Per-term weighted energy sums, the density, Q_a and the derivatives of the weighted
    density sum with respect to the staged local fields, for loc (rows, M)."""
    from solitons.model.reference import octant_average

    def split(values):
        rows = lambda a, b: jnp.moveaxis(values[a:b], 0, -1)  # noqa: E731
        forward = (rows(0, 3), rows(6, 9), rows(12, 15))
        backward = (rows(3, 6), rows(9, 12), rows(15, 18))
        lap = rows(21, 24) if needs_laplacian else None
        return rows(18, 21), forward, backward, lap

    def total(values):
        centre, forward, backward, lap = split(values)
        energies, dens = [], 0.0
        for term in terms:
            rho = term.coupling * octant_average(term, centre, forward, backward, lap)
            dens = dens + rho
            energies.append(jnp.sum(rho * weights))
        return sum(energies), (jnp.stack(energies), dens)

    (_, (energies, dens)), der = jax.value_and_grad(total, has_aux=True)(loc)
    q = [jnp.sum(der[6 * a:6 * a + 6] * loc[6 * a:6 * a + 6]) for a in range(3)]
    if needs_laplacian:
        q = [q[a] + jnp.sum(der[21:24] * loc[24 + 3 * a:27 + 3 * a]) for a in range(3)]
    return energies, dens, jnp.stack(q), der


@partial(jax.jit, static_argnums=(0, 1))
def _pointwise_part(terms, needs_laplacian, loc, weights):
    """`_chunk_pieces` over loc (rows, chunks * POINTWISE_CHUNK) one chunk at a time."""
    rows, size = loc.shape
    chunks = size // POINTWISE_CHUNK
    stacked = loc.reshape(rows, chunks, POINTWISE_CHUNK).transpose(1, 0, 2)
    energies, dens, q, der = jax.lax.map(lambda c: _chunk_pieces(terms, needs_laplacian, *c),
                                         (stacked, weights.reshape(chunks, POINTWISE_CHUNK)))
    return energies.sum(0), dens.reshape(size), q.sum(0), der.transpose(1, 0, 2).reshape(rows, size)


class XlaPointwise:
    """`_chunk_pieces` of every site, numpy in and out: the sites are padded to whole
    chunks (copies of the first site at weight zero, so that the padding adds nothing and
    stays finite) and split into ``parts`` (default: the cores) evaluated in parallel
    threads."""

    def __init__(self, terms, needs_laplacian, parts=None):
        self.terms = tuple(terms)
        self.needs_laplacian = needs_laplacian
        self.parts = parts

    def __call__(self, loc, weights=None) -> PointwiseResult:
        from concurrent.futures import ThreadPoolExecutor

        rows = loc.shape[0]
        shape = loc.shape[1:]
        sites = int(np.prod(shape))
        flat = loc.reshape(rows, sites)
        w = (np.ones(sites, dtype=loc.dtype) if weights is None
             else np.asarray(weights, dtype=loc.dtype).reshape(sites))
        parts = self.parts or max(1, min(len(os.sched_getaffinity(0)), sites // POINTWISE_CHUNK or 1))
        per_part = -(-sites // (parts * POINTWISE_CHUNK)) * POINTWISE_CHUNK
        padded = per_part * parts
        if padded > sites:
            flat = np.concatenate([flat, np.repeat(flat[:, :1], padded - sites, axis=1)], axis=1)
            w = np.concatenate([w, np.zeros(padded - sites, dtype=w.dtype)])

        def run(p):
            piece = slice(p * per_part, (p + 1) * per_part)
            out = _pointwise_part(self.terms, self.needs_laplacian, jnp.asarray(flat[:, piece]),
                                  jnp.asarray(w[piece]))
            return [np.asarray(a) for a in out]

        if parts == 1:
            results = [run(0)]
        else:
            with ThreadPoolExecutor(parts) as pool:
                results = list(pool.map(run, range(parts)))
        der_rows = 24 if self.needs_laplacian else 21
        return PointwiseResult(
            sum(r[0] for r in results),
            np.concatenate([r[1] for r in results])[:sites].reshape(shape),
            sum(r[2] for r in results),
            np.concatenate([r[3] for r in results], axis=1)[:der_rows, :sites].reshape((der_rows,) + shape))


def build(terms, needs_laplacian, compiled=True):
    """The compiled evaluator, or the jax one (with the reason) when the densities use
    something the translator does not handle.  Returns (evaluator, note)."""
    if compiled:
        try:
            return CompiledPointwise(terms, needs_laplacian), "compiled pointwise"
        except scalar_codegen.Unsupported as error:
            return XlaPointwise(terms, needs_laplacian), f"jax pointwise (primitive {error} not compiled)"
    return XlaPointwise(terms, needs_laplacian), "jax pointwise"

"""Compile a jax function of a few small arrays into straight-line scalar Python source.

The pointwise part of the staged route (`solitons.model.routes.evaluators`) evaluates the user terms'
density and its gradient at every site: a function of n (3,), d (3, 3) and lap (3,) with a
few dozen to a few hundred flops.  XLA on the CPU runs such a graph over a batch of sites
as a sequence of whole-array operations, each writing its intermediate to memory; written
as scalar statements inside one numba loop over sites, every intermediate stays in a
register.  This module does the translation:

- `jax.make_jaxpr` traces the function (the user's density and its jax gradient) for one
  site;
- every array variable becomes an object array of scalar expressions (a local name or a
  literal); elementwise primitives become one statement per element;
- structural primitives (slice, reshape, broadcast, transpose, pad, gather, scatter-add,
  stack, reductions by sum, ...) and dot products with a constant operand are affine in
  their array operands: their exact coefficient matrix comes from `jax.jacfwd` of the
  primitive itself, and each output element becomes a sum of input elements; a dot
  product of two traced operands is bilinear and is expanded the same way from its
  second derivative;
- calls (pjit, custom_jvp, custom_vjp, checkpoint) are inlined.

A primitive outside these sets raises `Unsupported`, and the caller keeps the jax route.
Everything here runs once per model, at trace time; the output is source text.
"""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
import numpy as np
from jax.extend import core as jcore


class Unsupported(Exception):
    """The function uses a primitive this translator does not handle."""


# elementwise primitives: a format string over the operand expressions
_UNARY = {
    "neg": "(-{0})", "exp": "math.exp({0})", "log": "math.log({0})", "log1p": "math.log1p({0})",
    "expm1": "math.expm1({0})", "sqrt": "math.sqrt({0})", "rsqrt": "(1.0 / math.sqrt({0}))",
    "sin": "math.sin({0})", "cos": "math.cos({0})", "tan": "math.tan({0})", "asin": "math.asin({0})",
    "acos": "math.acos({0})", "atan": "math.atan({0})", "sinh": "math.sinh({0})", "cosh": "math.cosh({0})",
    "tanh": "math.tanh({0})", "asinh": "math.asinh({0})", "acosh": "math.acosh({0})",
    "atanh": "math.atanh({0})", "abs": "abs({0})", "square": "({0} * {0})", "erf": "math.erf({0})",
    "erfc": "math.erfc({0})", "lgamma": "math.lgamma({0})", "logistic": "(1.0 / (1.0 + math.exp(-{0})))",
    "exp2": "(2.0 ** {0})", "floor": "np.floor({0})", "ceil": "np.ceil({0})", "is_finite": "math.isfinite({0})",
    "sign": "(1.0 if {0} > 0 else (-1.0 if {0} < 0 else {0}))", "not": "(not {0})",
    "cbrt": "math.copysign(abs({0}) ** (1.0 / 3.0), {0})",
    "stop_gradient": "{0}", "copy": "{0}", "copy_p": "{0}", "reduce_precision": "{0}", "optimization_barrier": "{0}",
}
_BINARY = {
    "add": "({0} + {1})", "add_any": "({0} + {1})", "sub": "({0} - {1})", "mul": "({0} * {1})",
    "div": "({0} / {1})", "pow": "({0} ** {1})", "max": "max({0}, {1})", "min": "min({0}, {1})",
    "atan2": "math.atan2({0}, {1})", "rem": "math.fmod({0}, {1})", "nextafter": "np.nextafter({0}, {1})",
    "gt": "({0} > {1})", "lt": "({0} < {1})", "ge": "({0} >= {1})", "le": "({0} <= {1})",
    "eq": "({0} == {1})", "ne": "({0} != {1})", "and": "({0} and {1})", "or": "({0} or {1})",
}
# affine in their array operands (given the constant ones): expanded from their Jacobian
_AFFINE = {
    "slice", "reshape", "broadcast_in_dim", "transpose", "concatenate", "squeeze", "expand_dims", "pad",
    "gather", "scatter-add", "scatter_add", "dynamic_slice", "dynamic_update_slice", "rev", "reduce_sum",
    "cumsum", "stack", "unstack", "split",
}
_CALLS = {"pjit": "jaxpr", "jit": "jaxpr", "closed_call": "call_jaxpr", "core_call": "call_jaxpr", "custom_jvp_call": "call_jaxpr",
          "custom_vjp_call": "call_jaxpr", "custom_vjp_call_jaxpr": "fun_jaxpr", "checkpoint": "jaxpr",
          "remat": "jaxpr", "custom_lin": None}


def literal(value) -> str:
    """Source text of one scalar constant, exact (shortest round-trip repr)."""
    value = np.asarray(value).item()
    if isinstance(value, bool):
        return "True" if value else "False"
    if isinstance(value, int):
        return f"({value})"
    value = float(value)
    if math.isnan(value):
        return "math.nan"
    if math.isinf(value):
        return "math.inf" if value > 0 else "(-math.inf)"
    return f"({value!r})"


class Sym:
    """A traced array: expressions (object array of source strings) and, when known at
    trace time, its value."""

    __slots__ = ("exprs", "value")

    def __init__(self, exprs, value=None):
        self.exprs = exprs
        self.value = value

    @classmethod
    def constant(cls, value):
        value = np.asarray(value)
        exprs = np.empty(value.shape, dtype=object)
        for index in np.ndindex(value.shape):
            exprs[index] = literal(value[index])
        return cls(exprs, value)


class Translator:
    """Accumulates the statements of one function body."""

    def __init__(self, prefix="t"):
        self.lines: list[str] = []
        self.prefix = prefix
        self.count = 0

    def emit(self, expr: str) -> str:
        name = f"{self.prefix}{self.count}"
        self.count += 1
        self.lines.append(f"{name} = {expr}")
        return name

    # ---- jaxpr walk ----
    def run(self, jaxpr, consts, args):
        env = {}

        def read(atom):
            if isinstance(atom, jcore.Literal):
                return Sym.constant(atom.val)
            return env[atom]

        for var, value in zip(jaxpr.constvars, consts):
            env[var] = Sym.constant(value)
        for var, value in zip(jaxpr.invars, args):
            env[var] = value
        for eqn in jaxpr.eqns:
            ins = [read(v) for v in eqn.invars]
            outs = self.equation(eqn, ins)
            for var, value in zip(eqn.outvars, outs):
                env[var] = value
        return [read(v) for v in jaxpr.outvars]

    def equation(self, eqn, ins):
        prim = eqn.primitive
        name = prim.name
        if name in _CALLS:
            return self.call(eqn, ins)
        if all(s.value is not None for s in ins):  # everything known: evaluate now
            outs = prim.bind(*[jnp.asarray(s.value) for s in ins], **eqn.params)
            outs = outs if prim.multiple_results else [outs]
            return [Sym.constant(np.asarray(o)) for o in outs]
        if name in _UNARY or name in _BINARY or name in ("integer_pow", "select_n", "convert_element_type",
                                                          "clamp"):
            return [self.elementwise(eqn, ins)]
        native = _NATIVE.get(name)
        if native is not None:
            try:
                return native(self, eqn, ins)
            except _Generic:
                pass
        if name in _AFFINE or name == "dot_general" and any(s.value is not None for s in ins):
            return self.affine(eqn, ins)
        if name == "dot_general":
            return self.bilinear(eqn, ins)
        if name in ("reduce_max", "reduce_min"):
            return [self.reduce_extremum(eqn, ins[0], "max" if name == "reduce_max" else "min")]
        raise Unsupported(name)

    def call(self, eqn, ins):
        key = _CALLS[eqn.primitive.name]
        if key is None or key not in eqn.params:
            raise Unsupported(eqn.primitive.name)
        inner = eqn.params[key]
        if isinstance(inner, jcore.ClosedJaxpr):
            return self.run(inner.jaxpr, inner.consts, ins)
        return self.run(inner, [], ins)

    # ---- elementwise ----
    def elementwise(self, eqn, ins):
        name = eqn.primitive.name
        aval = eqn.outvars[0].aval
        shape = aval.shape
        operands = [np.broadcast_to(s.exprs, shape) for s in ins]
        out = np.empty(shape, dtype=object)
        in_dtypes = [v.aval.dtype for v in eqn.invars]
        for index in np.ndindex(shape):
            args = [o[index] for o in operands]
            out[index] = self.emit(self._scalar(name, eqn.params, args, in_dtypes, aval.dtype))
        return Sym(out)

    @staticmethod
    def _scalar(name, params, args, in_dtypes, out_dtype):
        if name in _UNARY:
            if name == "not" and in_dtypes[0] != np.bool_:
                raise Unsupported("bitwise not")
            return _UNARY[name].format(*args)
        if name in _BINARY:
            if name in ("and", "or") and in_dtypes[0] != np.bool_:
                raise Unsupported(f"bitwise {name}")
            if name == "div" and not np.issubdtype(out_dtype, np.floating):
                raise Unsupported("integer division")
            return _BINARY[name].format(*args)
        if name == "integer_pow":
            y = int(params["y"])
            if y == 0:
                return "1.0"
            base = args[0] if y > 0 else f"(1.0 / {args[0]})"
            return "(" + " * ".join([base] * abs(y)) + ")" if abs(y) <= 4 else f"({base} ** {abs(y)})"
        if name == "clamp":
            low, x, high = args
            return f"min(max({x}, {low}), {high})"
        if name == "select_n":
            predicate, cases = args[0], args[1:]
            if in_dtypes[0] == np.bool_:
                return f"({cases[1]} if {predicate} else {cases[0]})"
            expr = cases[-1]
            for k in range(len(cases) - 2, -1, -1):
                expr = f"({cases[k]} if {predicate} == {k} else {expr})"
            return expr
        if name == "convert_element_type":
            source, target = np.dtype(in_dtypes[0]), np.dtype(params["new_dtype"])
            if target == np.bool_:
                return f"({args[0]} != 0)"
            if np.issubdtype(target, np.floating):
                return args[0] if np.issubdtype(source, np.floating) else f"float({args[0]})"
            if np.issubdtype(target, np.integer):
                return f"int({args[0]})"
            raise Unsupported(f"convert_element_type to {target}")
        raise Unsupported(name)

    # ---- affine and bilinear maps, expanded from their exact derivatives ----
    def _function_of_traced(self, eqn, ins):
        traced = [k for k, s in enumerate(ins) if s.value is None]
        for k in traced:
            if not np.issubdtype(eqn.invars[k].aval.dtype, np.floating):
                raise Unsupported(f"{eqn.primitive.name} of a traced non-float operand")

        def flat(*xs):
            args = [jnp.asarray(s.value) if s.value is not None else None for s in ins]
            for k, x in zip(traced, xs):
                args[k] = x
            outs = eqn.primitive.bind(*args, **eqn.params)
            outs = outs if eqn.primitive.multiple_results else [outs]
            return jnp.concatenate([jnp.ravel(o).astype(jnp.float64) for o in outs])

        zeros = [np.zeros(eqn.invars[k].aval.shape, dtype=eqn.invars[k].aval.dtype) for k in traced]
        return traced, flat, zeros

    def _split_outputs(self, eqn, flat_exprs):
        outs, start = [], 0
        for var in eqn.outvars:
            size = int(np.prod(var.aval.shape, dtype=int))
            outs.append(Sym(np.asarray(flat_exprs[start:start + size], dtype=object).reshape(var.aval.shape)))
            start += size
        return outs

    def _sum(self, pieces, offset=0.0):
        """A sum of (coefficient, expression) pairs plus a constant: a name or a new statement."""
        if offset == 0.0 and len(pieces) == 1 and pieces[0][0] == 1.0:
            return pieces[0][1]
        if not pieces:
            return literal(offset)
        parts = []
        for coefficient, expr in pieces:
            if coefficient == 1.0:
                parts.append(expr)
            elif coefficient == -1.0:
                parts.append(f"(-{expr})")
            else:
                parts.append(f"{literal(coefficient)} * {expr}")
        if offset != 0.0:
            parts.append(literal(offset))
        return self.emit(" + ".join(parts))

    def affine(self, eqn, ins):
        traced, flat, zeros = self._function_of_traced(eqn, ins)
        offset = np.asarray(flat(*zeros))
        jacobians = jax.jacfwd(flat, argnums=tuple(range(len(traced))))(*zeros)
        matrices = [np.asarray(j).reshape(len(offset), -1) for j in jacobians]
        probe = [np.random.default_rng(1).standard_normal(z.shape) for z in zeros]
        expected = offset + sum(m @ p.ravel() for m, p in zip(matrices, probe))
        if not np.allclose(np.asarray(flat(*probe)), expected, rtol=1e-12, atol=1e-12):
            raise Unsupported(f"{eqn.primitive.name} (not affine in its traced operands)")
        inputs = [ins[k].exprs.ravel() for k in traced]
        flat_exprs = []
        for i in range(len(offset)):
            pieces = []
            for m, exprs in zip(matrices, inputs):
                for j in np.flatnonzero(m[i]):
                    pieces.append((float(m[i, j]), exprs[j]))
            flat_exprs.append(self._sum(pieces, float(offset[i])))
        return self._split_outputs(eqn, flat_exprs)

    def bilinear(self, eqn, ins):
        traced, flat, zeros = self._function_of_traced(eqn, ins)
        if len(traced) != 2:
            raise Unsupported(eqn.primitive.name)
        tensor = np.asarray(jax.jacfwd(jax.jacfwd(flat, argnums=0), argnums=1)(*zeros))
        size = tensor.shape[0]
        tensor = tensor.reshape(size, zeros[0].size, zeros[1].size)
        left, right = ins[traced[0]].exprs.ravel(), ins[traced[1]].exprs.ravel()
        flat_exprs = []
        for i in range(size):
            parts = []
            for j, k in zip(*np.nonzero(tensor[i])):
                c = float(tensor[i, j, k])
                product = f"{left[j]} * {right[k]}"
                parts.append(product if c == 1.0 else f"{literal(c)} * {product}")
            flat_exprs.append(self.emit(" + ".join(parts)) if parts else "0.0")
        return self._split_outputs(eqn, flat_exprs)

    def reduce_extremum(self, eqn, operand, which):
        moved, out_shape = _reduction_groups(operand.exprs, eqn.params["axes"])
        out = np.empty(out_shape, dtype=object)
        for index in np.ndindex(out_shape):
            expr = moved[index][0]
            for other in moved[index][1:]:
                expr = f"{which}({expr}, {other})"
            out[index] = self.emit(expr)
        return Sym(out)


class _Generic(Exception):
    """A native rule that does not cover these parameters: use the Jacobian expansion."""


def _rearranged(exprs):
    return [Sym(np.asarray(exprs, dtype=object))]


def _slice(tr, eqn, ins):
    p = eqn.params
    strides = p["strides"] or (1,) * len(p["start_indices"])
    index = tuple(slice(int(a), int(b), int(c)) for a, b, c in zip(p["start_indices"], p["limit_indices"], strides))
    return _rearranged(ins[0].exprs[index])


def _squeeze(tr, eqn, ins):
    return _rearranged(ins[0].exprs.reshape(eqn.outvars[0].aval.shape))


def _reshape(tr, eqn, ins):
    if eqn.params.get("dimensions") is not None:
        raise _Generic
    return _rearranged(ins[0].exprs.reshape(eqn.outvars[0].aval.shape))


def _broadcast_in_dim(tr, eqn, ins):
    shape = eqn.outvars[0].aval.shape
    dims = tuple(int(d) for d in eqn.params["broadcast_dimensions"])
    expanded = [1] * len(shape)
    for k, d in enumerate(dims):
        expanded[d] = ins[0].exprs.shape[k]
    return _rearranged(np.broadcast_to(ins[0].exprs.reshape(expanded), shape))


def _transpose(tr, eqn, ins):
    return _rearranged(np.transpose(ins[0].exprs, tuple(int(a) for a in eqn.params["permutation"])))


def _concatenate(tr, eqn, ins):
    return _rearranged(np.concatenate([s.exprs for s in ins], axis=int(eqn.params["dimension"])))


def _rev(tr, eqn, ins):
    return _rearranged(np.flip(ins[0].exprs, axis=tuple(int(a) for a in eqn.params["dimensions"])))


def _stack(tr, eqn, ins):
    if "axis" not in eqn.params:
        raise _Generic
    return _rearranged(np.stack([s.exprs for s in ins], axis=int(eqn.params["axis"])))


def _unstack(tr, eqn, ins):
    if "axis" not in eqn.params:
        raise _Generic
    parts = np.moveaxis(ins[0].exprs, int(eqn.params["axis"]), 0)
    return [Sym(np.asarray(part, dtype=object)) for part in parts]


def _pad(tr, eqn, ins):
    config = [tuple(int(v) for v in c) for c in eqn.params["padding_config"]]
    if any(lo < 0 or hi < 0 for lo, hi, _ in config):
        raise _Generic
    operand = ins[0].exprs
    out = np.full(eqn.outvars[0].aval.shape, ins[1].exprs.reshape(()).item(), dtype=object)
    index = tuple(slice(lo, lo + (size - 1) * (interior + 1) + 1, interior + 1)
                  for (lo, _, interior), size in zip(config, operand.shape))
    if operand.size:
        out[index] = operand
    return _rearranged(out)


def _reduction_groups(exprs, axes):
    """exprs with the reduced ``axes`` moved last and merged: (array (kept..., M), kept shape)."""
    axes = [int(a) for a in axes]
    keep = [a for a in range(exprs.ndim) if a not in axes]
    moved = np.transpose(exprs, keep + axes)
    out_shape = moved.shape[:len(keep)]
    return moved.reshape(out_shape + (-1,)), out_shape


def _reduce_sum(tr, eqn, ins):
    moved, out_shape = _reduction_groups(ins[0].exprs, eqn.params["axes"])
    out = np.empty(out_shape, dtype=object)
    for index in np.ndindex(out_shape):
        terms = [e for e in moved[index] if e != "(0.0)"]
        out[index] = tr._sum([(1.0, e) for e in terms]) if terms else "(0.0)"
    return _rearranged(out)


def _dot_general(tr, eqn, ins):
    """Sum of products over the contracted axes; known zeros are skipped, known ones
    dropped from the products."""
    (lc, rc), (lb, rb) = eqn.params["dimension_numbers"]
    lc, rc, lb, rb = ([int(a) for a in axes] for axes in (lc, rc, lb, rb))
    left, right = ins
    lfree = [a for a in range(left.exprs.ndim) if a not in lc and a not in lb]
    rfree = [a for a in range(right.exprs.ndim) if a not in rc and a not in rb]

    def arrange(sym, batch, free, contract):
        exprs = np.transpose(sym.exprs, batch + free + contract)
        values = None if sym.value is None else np.transpose(np.asarray(sym.value), batch + free + contract)
        return exprs, values

    lex, lval = arrange(left, lb, lfree, lc)
    rex, rval = arrange(right, rb, rfree, rc)
    nb, nlf, nrf = len(lb), len(lfree), len(rfree)
    batch_shape = lex.shape[:nb]
    lshape, rshape = lex.shape[nb:nb + nlf], rex.shape[nb:nb + nrf]
    csize = int(np.prod(lex.shape[nb + nlf:], dtype=int))
    lex = lex.reshape(batch_shape + lshape + (csize,))
    rex = rex.reshape(batch_shape + rshape + (csize,))
    if lval is not None:
        lval = lval.reshape(lex.shape)
    if rval is not None:
        rval = rval.reshape(rex.shape)
    out = np.empty(batch_shape + lshape + rshape, dtype=object)
    for b in np.ndindex(batch_shape):
        for i in np.ndindex(lshape):
            for j in np.ndindex(rshape):
                parts = []
                for k in range(csize):
                    lk, rk = b + i + (k,), b + j + (k,)
                    known = [v[idx] for v, idx in ((lval, lk), (rval, rk)) if v is not None]
                    if any(float(v) == 0.0 for v in known):
                        continue
                    factors = [e for e, v, idx in ((lex[lk], lval, lk), (rex[rk], rval, rk))
                               if v is None or float(v[idx]) != 1.0]
                    parts.append(" * ".join(factors) if factors else "1.0")
                out[b + i + j] = tr.emit(" + ".join(parts)) if parts else "(0.0)"
    return _rearranged(out)


_NATIVE = {"slice": _slice, "squeeze": _squeeze, "reshape": _reshape,
           "broadcast_in_dim": _broadcast_in_dim, "transpose": _transpose, "concatenate": _concatenate,
           "rev": _rev, "stack": _stack, "unstack": _unstack, "pad": _pad, "reduce_sum": _reduce_sum,
           "dot_general": _dot_general}


def translate(function, example_args, input_names):
    """Statements computing ``function(*example_args)`` (a tuple of arrays) from scalar
    inputs: ``input_names[k]`` is an object array of the names of the k-th argument's
    elements, shaped like it.  Returns (statements, output expression arrays)."""
    closed = jax.make_jaxpr(function)(*example_args)
    translator = Translator()
    args = [Sym(np.asarray(names, dtype=object)) for names in input_names]
    outs = translator.run(closed.jaxpr, closed.consts, args)
    return translator.lines, [o.exprs for o in outs]

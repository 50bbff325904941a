"""Run configuration: TOML schema, layering and validation.

Layers, later wins: built-in defaults, the TOML file, ``dotted.key=value`` overrides from
the command line.  Every problem is reported as one `ConfigError` naming the source (file
or command line), the dotted key and the offending value, before any work starts.
"""

from __future__ import annotations

import copy
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import tomli_w

from solitons.lattice.grid import BOUNDARIES
from solitons.model.energy import BACKENDS, MIN_POINTS, SCHEMES
from solitons.model.terms import BUILTIN_TERMS
from solitons.relaxation.initial import FAMILIES, FILE_FAMILIES, describe, expected_charge
from solitons.relaxation.minimise import METHODS, PRECONDITIONERS, StoppingRule

DEFAULTS: dict[str, Any] = {
    # box of side 16 at h = 0.2: an empty configuration relaxes Q = 1 to E = 1.231867,
    # virial -0.0011, 0.038 % of the energy on the border, verdict stable, in 32 s on 2
    # cores (measured); 64 points at h = 0.125 (side 7.9) squeezed it to virial -0.096
    "grid": {"points": 81, "spacing": 0.2, "boundary": "fixed", "scheme": "sixth", "stretch": 0.0,
             "symmetry": "none"},
    "terms": {"dirichlet": {"coupling": 1.0}, "skyrme_faddeev": {"coupling": 1.0}},
    "initial": {"family": "axial", "a": 1, "b": 1, "alpha": 1, "beta": 1, "factors": [], "parts": [],
                "size": 1.0, "centre": [0.0, 0.0, 0.0], "orientation": [0.0, 0.0, 0.0],
                "noise": 0.0, "seed": 0, "file": "", "function": "field", "parameters": {}, "dataset": "",
                "spacing": 0.0, "charge": 0},
    "relax": {"method": "lbfgs", "max_steps": 4000, "force_tol": 1e-3, "energy_tol": 1e-10,
              "patience": 20, "time_step": 0.0, "checkpoint_every": 100,
              "progress_seconds": 5.0, "hessian_modes": 0, "backend": "auto",
              "coarse_start": False, "preconditioner": "laplacian", "preconditioner_shift": 1.0,
              "saddle_check": True, "saddle_noise": 0.02},
}

_TERM_KEYS = ("kind", "coupling")
_USER_TERM_KEYS = ("file", "function", "derivatives", "laplacian", "parameters")
USER_KIND = "user"


class ConfigError(ValueError):
    """A bad configuration: message names source, key and value."""

    def __init__(self, source: str, key: str, value: Any, problem: str):
        self.source, self.key, self.value, self.problem = source, key, value, problem
        super().__init__(f"{source}: {key} = {_show(value)}: {problem}")


def _show(value: Any) -> str:
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, dict):
        return "{table}"
    text = str(value)
    return text if len(text) <= 40 else f"{text[:20]}...({len(text)} characters)"


@dataclass(frozen=True)
class GridSpec:
    points: tuple[int, int, int]
    spacing: tuple[float, float, float]
    boundary: str
    scheme: str
    stretch: tuple[float, float, float] = (0.0, 0.0, 0.0)
    symmetry: str = "none"  # "axial": the half plane of solitons.axial.model, covering the same box


@dataclass(frozen=True)
class TermSpec:
    name: str
    kind: str
    coupling: float
    parameters: tuple[tuple[str, float], ...] = ()
    file: str | None = None  # user terms: absolute path of the Python file
    function: str | None = None
    derivatives: int | None = None
    laplacian: bool = False


# keys each family reads (besides size, centre, orientation)
FAMILY_KEYS = {"axial": ("a", "b"), "torus_knot": ("alpha", "beta", "a", "b"),
               "rational": ("alpha", "beta", "factors"), "several": ("parts",)}
_PART_KEYS = ("family", "a", "b", "alpha", "beta", "factors", "size", "centre", "orientation")


@dataclass(frozen=True)
class InitialSpec:
    family: str
    part: dict  # the family description read by solitons.relaxation.initial.initial_field
    noise: float
    seed: int

    @property
    def expected_charge(self) -> int:
        return expected_charge(self.part)

    @property
    def description(self) -> str:
        return describe(self.part)

    @property
    def size(self) -> float:
        return self.part.get("size", 1.0)


@dataclass(frozen=True)
class RelaxSpec:
    method: str
    max_steps: int
    force_tol: float
    energy_tol: float
    patience: int
    time_step: float
    checkpoint_every: int
    progress_seconds: float
    hessian_modes: int = 0
    backend: str = "auto"
    coarse_start: bool = False
    preconditioner: str = "laplacian"
    preconditioner_shift: float = 1.0
    saddle_check: bool = True
    saddle_noise: float = 0.02

    def stopping_rule(self) -> StoppingRule:
        """The run's stopping rule, built here once for every caller."""
        return StoppingRule(self.max_steps, self.force_tol, self.energy_tol, self.patience)


@dataclass(frozen=True)
class RunSpec:
    grid: GridSpec
    terms: tuple[TermSpec, ...]
    initial: InitialSpec
    relax: RelaxSpec
    text: str  # the merged configuration as TOML, written into every output file


# Real numbers beyond this magnitude are refused before any work: no coupling, spacing or
# constant of this tool needs them, and beyond it float arithmetic overflows (a 300-digit
# integer cannot become a float; a coupling of 1e308 overflows the energy).  Integers keep
# their own checks (a huge grid.points is refused by the memory guard, naming the GiB).
MAX_MAGNITUDE = 1e12


def _is_int(v):
    return isinstance(v, int) and not isinstance(v, bool)


def _is_real(v):
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    if isinstance(v, int):
        return abs(v) <= MAX_MAGNITUDE
    return math.isfinite(v) and abs(v) <= MAX_MAGNITUDE


class _Checker:
    def __init__(self, merged: dict, sources: dict[str, str]):
        self.merged = merged
        self.sources = sources

    def fail(self, key, value, problem):
        raise ConfigError(self.sources.get(key, self.sources.get("*", "config")), key, value, problem)

    def get(self, table, name):
        return self.merged[table][name]

    def integer(self, table, name, minimum=None):
        key, v = f"{table}.{name}", self.get(table, name)
        if not _is_int(v):
            self.fail(key, v, "must be an integer")
        if minimum is not None and v < minimum:
            self.fail(key, v, f"must be at least {minimum}")
        return int(v)

    def real(self, table, name, positive=False, non_negative=False):
        key, v = f"{table}.{name}", self.get(table, name)
        if not _is_real(v):
            self.fail(key, v, "must be a finite number of magnitude at most 1e12")
        if positive and v <= 0:
            self.fail(key, v, "must be positive")
        if non_negative and v < 0:
            self.fail(key, v, "must not be negative")
        return float(v)

    def boolean(self, table, name):
        key, v = f"{table}.{name}", self.get(table, name)
        if not isinstance(v, bool):
            self.fail(key, v, "must be true or false")
        return v

    def choice(self, table, name, options):
        key, v = f"{table}.{name}", self.get(table, name)
        if not isinstance(v, str) or v not in options:
            self.fail(key, v, f"must be one of {', '.join(options)}")
        return v

    def triple(self, table, name, kind, positive=False, non_negative=False):
        key, v = f"{table}.{name}", self.get(table, name)
        values = [v] * 3 if not isinstance(v, list) else v
        if len(values) != 3:
            self.fail(key, v, "must be one value or a list of three")
        ok = _is_int if kind == "int" else _is_real
        for item in values:
            if not ok(item):
                what = "integers" if kind == "int" else "finite numbers of magnitude at most 1e12"
                self.fail(key, v, f"must hold {what}")
            if positive and item <= 0:
                self.fail(key, v, "must be positive")
            if non_negative and item < 0:
                self.fail(key, v, "must be zero (uniform axis) or a positive length")
        return tuple(int(x) if kind == "int" else float(x) for x in values)


def _merge_file(merged: dict, data: dict, source: str, sources: dict):
    for table, content in data.items():
        if table not in DEFAULTS:
            raise ConfigError(source, table, content, f"unknown table; expected one of {', '.join(DEFAULTS)}")
        if not isinstance(content, dict):
            raise ConfigError(source, table, content, "must be a table")
        if table == "terms":
            merged["terms"] = {}
            for name, term in content.items():
                key = f"terms.{name}"
                if not isinstance(term, dict):
                    raise ConfigError(source, key, term, "must be a table with kind and coupling")
                merged["terms"][name] = dict(term)
                for sub in term:
                    sources[f"{key}.{sub}"] = source
                sources[key] = source
            continue
        for name, value in content.items():
            key = f"{table}.{name}"
            if name not in DEFAULTS[table]:
                raise ConfigError(source, key, value,
                                  f"unknown key; expected one of {', '.join(DEFAULTS[table])}")
            merged[table][name] = value
            sources[key] = source


def parse_override(text: str) -> tuple[str, Any]:
    """``dotted.key=value``; the value is read as TOML, or kept as a bare string."""
    if "=" not in text:
        raise ConfigError("command line", text, text, "an override must look like dotted.key=value")
    key, raw = text.split("=", 1)
    key = key.strip()
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw.strip()
    return key, value


def _apply_override(merged: dict, key: str, value: Any, sources: dict):
    parts = key.split(".")
    source = "command line"
    if parts[0] == "terms" and len(parts) == 3:
        _, name, sub = parts
        merged["terms"].setdefault(name, {})[sub] = value
    elif len(parts) == 2 and parts[0] in DEFAULTS and parts[0] != "terms":
        if parts[1] not in DEFAULTS[parts[0]]:
            raise ConfigError(source, key, value,
                              f"unknown key; expected one of {', '.join(DEFAULTS[parts[0]])}")
        merged[parts[0]][parts[1]] = value
    else:
        raise ConfigError(source, key, value, "unknown key")
    sources[key] = source


def load(path: str | Path | None, overrides: list[str] = (), text: str | None = None,
         base_dir: str | Path | None = None, ignore_tables: tuple[str, ...] = ()) -> RunSpec:
    """Read, merge and validate a configuration (``text`` instead of a file if given).
    Relative paths of user-term files are taken from ``base_dir`` (default: the config
    file's folder, or the working directory)."""
    source = str(path) if path is not None else "built-in example"
    if text is None:
        text = read_text_file(path, source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(source, "(syntax)", "", f"not valid TOML: {error}") from None
    for table in ignore_tables:  # read by another layer (for example [scan])
        data.pop(table, None)
    merged = copy.deepcopy(DEFAULTS)
    sources: dict[str, str] = {"*": source}
    _merge_file(merged, data, source, sources)
    for item in overrides:
        key, value = parse_override(item)
        _apply_override(merged, key, value, sources)
    if base_dir is None:
        base_dir = Path(path).parent if path is not None else Path.cwd()
    return validate(merged, sources, Path(base_dir))


def read_text_file(path: str | Path, source: str) -> str:
    """The text of a configuration file; a missing, unreadable or non-UTF-8 file is a
    ConfigError naming the file (and the first bad byte)."""
    try:
        data = Path(path).read_bytes()
    except OSError as error:
        raise ConfigError(source, "(file)", str(path), f"cannot be read: {error.strerror}") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as error:
        line = data[:error.start].count(b"\n") + 1
        raise ConfigError(source, "(file)", str(path),
                          f"is not UTF-8 text (TOML files must be): byte 0x{data[error.start]:02x} at offset "
                          f"{error.start}, line {line}") from None


def read_campaign_table(path: str | Path, name: str, allowed: tuple[str, ...], what: str) -> dict:
    """The ``[name]`` table of a campaign file (scan, survey), its keys checked against
    ``allowed``; file, syntax and key errors as ConfigError."""
    source = str(path)
    try:
        data = tomllib.loads(read_text_file(path, source))
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(source, "(syntax)", "", f"not valid TOML: {error}") from None
    table = data.get(name)
    if not isinstance(table, dict):
        raise ConfigError(source, name, table, f"{what} needs a [{name}] table")
    for key in table:
        if key not in allowed:
            raise ConfigError(source, f"{name}.{key}", table[key], f"unknown key; expected {', '.join(allowed)}")
    return table


def _term_spec(c: _Checker, name: str, term: dict, base_dir: Path) -> TermSpec:

    key = f"terms.{name}"
    kind = term.get("kind", name)
    if not isinstance(kind, str) or (kind not in BUILTIN_TERMS and kind != USER_KIND):
        c.fail(f"{key}.kind" if "kind" in term else key, kind,
               f"unknown term kind; built-in kinds: {', '.join(BUILTIN_TERMS)}, or {USER_KIND!r}")
    coupling = term.get("coupling", 1.0)
    if not _is_real(coupling):
        c.fail(f"{key}.coupling", coupling, "must be a finite number of magnitude at most 1e12")
    if kind != USER_KIND:
        allowed = dict(BUILTIN_TERMS[kind].parameters)
        parameters = []
        for sub, value in term.items():
            if sub in _TERM_KEYS:
                continue
            if sub not in allowed:
                expected = ", ".join(list(_TERM_KEYS) + list(allowed))
                c.fail(f"{key}.{sub}", value, f"unknown key for a {kind} term; expected {expected}")
            if not _is_real(value):
                c.fail(f"{key}.{sub}", value, "must be a finite number of magnitude at most 1e12")
            parameters.append((sub, float(value)))
        for sub, value, why in BUILTIN_TERMS[kind].violations(dict(parameters)):  # the term's own limits
            c.fail(f"{key}.{sub}", value, why)
        return TermSpec(name, kind, float(coupling), tuple(sorted(parameters)))
    for sub, value in term.items():
        if sub not in _TERM_KEYS + _USER_TERM_KEYS:
            c.fail(f"{key}.{sub}", value,
                   f"unknown key for a user term; expected {', '.join(_TERM_KEYS + _USER_TERM_KEYS)}")
    file = term.get("file")
    if not isinstance(file, str) or not file:
        c.fail(f"{key}.file", file, "a user term needs the path of its Python file")
    function = term.get("function", "density")
    if not isinstance(function, str) or not function.isidentifier():
        c.fail(f"{key}.function", function, "must be the name of a Python function")
    derivatives = term.get("derivatives")
    if derivatives is not None and (not _is_int(derivatives) or derivatives < 0):
        c.fail(f"{key}.derivatives", derivatives, "must be a non-negative integer (Derrick weight)")
    laplacian = term.get("laplacian", False)
    if not isinstance(laplacian, bool):
        c.fail(f"{key}.laplacian", laplacian, "must be true or false")
    parameters = term.get("parameters", {})
    if not isinstance(parameters, dict) or not all(_is_real(v) for v in parameters.values()):
        c.fail(f"{key}.parameters", parameters, "must be a table of numbers")
    resolved = Path(file) if Path(file).is_absolute() else (base_dir / file)
    return TermSpec(name, USER_KIND, float(coupling),
                    tuple(sorted((k, float(v)) for k, v in parameters.items())),
                    str(resolved.resolve()), function, derivatives, laplacian)


def _initial_part(c: _Checker, prefix: str, table: dict, top: bool = False) -> dict:
    """Validate one family description (the [initial] table or one of its parts)."""
    def fail(name, value, problem):
        c.fail(f"{prefix}.{name}", value, problem)

    if not top:
        for name in table:
            if name not in _PART_KEYS:
                fail(name, table[name], f"unknown key; expected one of {', '.join(_PART_KEYS)}")
    family = table.get("family", "axial")
    allowed = FAMILIES if top else tuple(f for f in FAMILIES if f not in ("several", "result"))
    if family not in allowed:
        fail("family", family, f"must be one of {', '.join(allowed)}")
    defaults = DEFAULTS["initial"]
    part: dict = {"family": family}

    def integer(name, minimum):
        v = table.get(name, defaults[name])
        if not _is_int(v) or v < minimum:
            fail(name, v, f"must be an integer of at least {minimum}")
        return int(v)

    def triple(name):
        v = table.get(name, defaults[name])
        values = [v] * 3 if not isinstance(v, list) else v
        if len(values) != 3 or not all(_is_real(x) for x in values):
            fail(name, v, "must be a list of three finite numbers of magnitude at most 1e12")
        return tuple(float(x) for x in values)

    if family in ("axial", "torus_knot"):
        part["a"], part["b"] = integer("a", 1), integer("b", 1)
    if family in ("torus_knot", "rational"):
        # alpha >= 1 keeps W = 0 (the vacuum) at infinity, where Z1 = 0
        part["alpha"], part["beta"] = integer("alpha", 1), integer("beta", 0)
    if family == "rational":
        factors = table.get("factors", [])
        if not isinstance(factors, list) or not factors:
            fail("factors", factors, "a rational family needs factors = [[a, b], [a, b, c], ...] "
                 "(one per torus curve Z1^a + c Z0^b, c = 1 if left out, [a, b, re, im] for complex c)")
        clean = []
        for factor in factors:
            ok = (isinstance(factor, list) and 2 <= len(factor) <= 4 and all(_is_int(x) and x >= 1 for x in factor[:2])
                  and all(_is_real(x) for x in factor[2:]))
            if not ok:
                fail("factors", factor, "each factor is [a, b], [a, b, c] or [a, b, re(c), im(c)] "
                     "with integers a, b >= 1")
            c_value = complex(*[float(x) for x in factor[2:]]) if len(factor) > 2 else 1.0
            if c_value == 0:
                fail("factors", factor, "the coefficient c must not be zero")
            clean.append([int(factor[0]), int(factor[1])] + [float(x) for x in factor[2:]])
        keys = [(f[0], f[1], complex(*f[2:]) if len(f) > 2 else 1.0) for f in clean]
        if len(set(keys)) != len(keys):
            fail("factors", factors, "factors must differ (a repeated factor is not a regular map)")
        part["factors"] = [[f[0], f[1], complex(*f[2:]) if len(f) > 2 else 1.0] for f in clean]
    if family == "several":
        parts = table.get("parts", [])
        if not isinstance(parts, list) or len(parts) < 2 or not all(isinstance(p, dict) for p in parts):
            fail("parts", parts, "several needs parts = [{family = ..., centre = [...], ...}, ...] "
                 "with at least two entries")
        part["parts"] = [_initial_part(c, f"{prefix}.parts[{k}]", p) for k, p in enumerate(parts)]
        return part
    size = table.get("size", defaults["size"])
    if not _is_real(size) or size <= 0:
        fail("size", size, "must be a positive number of magnitude at most 1e12")
    part["size"] = float(size)
    part["centre"] = triple("centre")
    part["orientation"] = triple("orientation")
    return part


def half_sides(grid: GridSpec) -> tuple[float, ...]:
    """Distance from the box centre to its border per axis (physical, stretched grids
    included), from the grid settings alone."""
    sides = []
    for n, h, s in zip(grid.points, grid.spacing, grid.stretch):
        xi = 0.5 * n * h if grid.boundary == "periodic" else 0.5 * (n - 1) * h
        try:
            sides.append(s * math.sinh(xi / s) if s else xi)
        except OverflowError:
            sides.append(math.inf)
    return tuple(sides)


def _check_inside_box(c: _Checker, grid: GridSpec, part: dict, prefix: str) -> None:
    """The initial soliton (core radius about ``size`` around ``centre``) must lie inside
    the box, clear of its border: otherwise the run starts from a cut field and its
    verdict would blame the lattice."""
    if part["family"] == "several":
        for k, sub in enumerate(part["parts"]):
            _check_inside_box(c, grid, sub, f"{prefix}.parts[{k}]")
        return
    half = half_sides(grid)
    box = "x".join(f"{2 * a:.4g}" for a in half)
    for axis, (x, a) in enumerate(zip(part["centre"], half)):
        if abs(x) >= a:
            c.fail(f"{prefix}.centre", list(part["centre"]), f"lies outside the box ({box}, centred on the "
                   f"origin): coordinate {'xyz'[axis]} = {x:g} is beyond +-{a:.4g}")
    for axis, (x, a) in enumerate(zip(part["centre"], half)):
        if abs(x) + part["size"] >= a:
            c.fail(f"{prefix}.size", part["size"], f"the initial soliton (radius about size = {part['size']:g} "
                   f"around {'xyz'[axis]} = {x:g}) reaches the border of the box ({box}) at +-{a:.4g}: "
                   "take a smaller size or a larger box (grid.points, grid.spacing or grid.stretch)")


SYMMETRIES = ("none", "axial")


def _result_part(c: _Checker, file, base_dir: Path) -> dict:
    """initial.family = "result": the file must be a result with a Hopf charge."""
    import h5py

    if not isinstance(file, str) or not file:
        c.fail("initial.file", file, "the result family needs initial.file = the path of a result.h5 "
               "(or of the run directory holding it)")
    path = Path(file) if Path(file).is_absolute() else base_dir / file
    if path.is_dir():
        path = path / "result.h5"
    try:
        with h5py.File(path, "r") as h5:
            charge = float(h5.attrs["hopf_charge"])
    except (OSError, KeyError) as error:
        c.fail("initial.file", file, f"is not a readable result file ({path}: {error})")
    if not round(charge):
        c.fail("initial.file", file, f"holds a field of Hopf charge {charge:.4f}: nothing to relax")
    return {"family": "result", "file": str(path.resolve()), "charge": int(round(charge))}


def _field_file_part(c: _Checker, family: str, table: dict, base_dir: Path, grid: GridSpec) -> dict:
    """initial.family = "formula" or "array" (solitons.io.fields): a readable file, the
    charge the field should carry (checked on the start field), the formula's function
    and parameters or the array's dataset and spacing."""
    file = table.get("file", "")
    what = "a Python file with a function of (x, y, z)" if family == "formula" else "an .npy, .h5 or .hdf5 file"
    if not isinstance(file, str) or not file:
        c.fail("initial.file", file, f"the {family} family needs initial.file = the path of {what}")
    path = Path(file) if Path(file).is_absolute() else base_dir / file
    if not path.is_file():
        c.fail("initial.file", file, f"no such file ({path})")
    charge = table.get("charge", 0)
    if not _is_int(charge) or charge == 0:
        c.fail("initial.charge", charge, f"the {family} family needs the Hopf charge the field carries "
               "(a non-zero integer; the start field is checked against it)")
    part = {"family": family, "file": str(path.resolve()), "charge": int(charge)}
    if family == "formula":
        function = table.get("function", "field")
        if not isinstance(function, str) or not function.isidentifier():
            c.fail("initial.function", function, "must be the name of a function in initial.file")
        parameters = table.get("parameters", {})
        if not isinstance(parameters, dict) or not all(_is_real(v) for v in parameters.values()):
            c.fail("initial.parameters", parameters, "must be a table of finite numbers")
        part.update(function=function, parameters={k: float(v) for k, v in parameters.items()})
    else:
        dataset = table.get("dataset", "")
        if not isinstance(dataset, str):
            c.fail("initial.dataset", dataset, "must be the name of a dataset in the HDF5 file")
        spacing = table.get("spacing", 0.0)
        values = [spacing] * 3 if not isinstance(spacing, list) else spacing
        if len(values) != 3 or not all(_is_real(v) and v >= 0 for v in values) or (any(values) and not all(values)):
            c.fail("initial.spacing", spacing, "must be the file's lattice spacing (a positive number or three; "
                   "0 = the run's grid.spacing)")
        part.update(dataset=dataset, spacing=tuple(float(v) for v in values) if any(values) else grid.spacing)
    unused = {"function", "parameters"} if family == "array" else {"dataset", "spacing"}
    for key in unused:
        if table.get(key, DEFAULTS["initial"][key]) != DEFAULTS["initial"][key]:
            c.fail(f"initial.{key}", table[key], f"is not used by the {family} family")
    return part


def _check_axial(c: _Checker, grid: GridSpec, initial: InitialSpec, relax: RelaxSpec) -> None:
    """grid.symmetry = "axial": what the half plane can represent and run."""
    if grid.boundary != "fixed":
        c.fail("grid.boundary", grid.boundary, "the axial mode needs boundary = \"fixed\" (its far border "
               "is held at the vacuum)")
    part = initial.part
    if part["family"] != "axial":
        c.fail("initial.family", part["family"], "the axial mode starts from the axial maps W = Z1^a / Z0^b "
               "(family = \"axial\"; a is the winding about the axis)")
    if part["centre"][0] or part["centre"][1]:
        c.fail("initial.centre", list(part["centre"]), "must lie on the symmetry axis (x = y = 0) in the axial mode")
    if any(part["orientation"]):
        c.fail("initial.orientation", list(part["orientation"]), "must be [0, 0, 0] in the axial mode "
               "(the symmetry axis is z)")
    if relax.hessian_modes:
        c.fail("relax.hessian_modes", relax.hessian_modes, "the Hessian study is a 3D one: carry the axial "
               "result into 3D (initial.family = \"result\") and run it there")
    if relax.coarse_start:
        c.fail("relax.coarse_start", True, "the axial mode has no coarse start (it needs none)")


def validate(merged: dict, sources: dict, base_dir: Path = Path(".")) -> RunSpec:
    c = _Checker(merged, sources)
    grid = GridSpec(
        points=c.triple("grid", "points", "int", positive=True),
        spacing=c.triple("grid", "spacing", "real", positive=True),
        boundary=c.choice("grid", "boundary", BOUNDARIES),
        scheme=c.choice("grid", "scheme", tuple(SCHEMES)),
        stretch=c.triple("grid", "stretch", "real", non_negative=True),
        symmetry=c.choice("grid", "symmetry", SYMMETRIES),
    )
    if any(grid.stretch) and grid.boundary == "periodic":
        c.fail("grid.stretch", merged["grid"]["stretch"], "a stretched grid needs boundary = \"fixed\" "
               "(it exists to reach far from the soliton; a periodic box has no far region)")
    if min(grid.points) < MIN_POINTS:
        c.fail("grid.points", merged["grid"]["points"],
               f"the lattice stencils need at least {MIN_POINTS} points per axis")

    if not merged["terms"]:
        c.fail("terms", {}, "at least one energy term is needed")
    terms = tuple(_term_spec(c, name, term, base_dir) for name, term in merged["terms"].items())
    if all(t.coupling == 0.0 for t in terms):
        c.fail(f"terms.{terms[0].name}.coupling", 0.0, "every coupling is zero: the energy vanishes for every "
               "field, so there is nothing to relax (give at least one term a non-zero coupling)")

    family = c.choice("initial", "family", FAMILIES)
    if family == "result":
        part = _result_part(c, merged["initial"].get("file", ""), base_dir)
    elif family in ("formula", "array"):
        part = _field_file_part(c, family, merged["initial"], base_dir, grid)
    else:
        part = _initial_part(c, "initial", merged["initial"], top=True)
    if family not in ("formula", "array"):
        for key in ("function", "parameters", "dataset", "spacing", "charge"):
            if merged["initial"].get(key, DEFAULTS["initial"][key]) != DEFAULTS["initial"][key]:
                c.fail(f"initial.{key}", merged["initial"][key], "is used only by the formula and array families")
    initial = InitialSpec(
        family=family,
        part=part,
        noise=c.real("initial", "noise", non_negative=True),
        seed=c.integer("initial", "seed", minimum=0),
    )
    if family not in FILE_FAMILIES:
        _check_inside_box(c, grid, initial.part, "initial")
    relax = RelaxSpec(
        method=c.choice("relax", "method", METHODS),
        max_steps=c.integer("relax", "max_steps", minimum=1),
        force_tol=c.real("relax", "force_tol", non_negative=True),
        energy_tol=c.real("relax", "energy_tol", non_negative=True),
        patience=c.integer("relax", "patience", minimum=1),
        time_step=c.real("relax", "time_step", non_negative=True),
        checkpoint_every=c.integer("relax", "checkpoint_every", minimum=0),
        progress_seconds=c.real("relax", "progress_seconds", non_negative=True),
        hessian_modes=c.integer("relax", "hessian_modes", minimum=0),
        backend=c.choice("relax", "backend", BACKENDS),
        coarse_start=c.boolean("relax", "coarse_start"),
        preconditioner=c.choice("relax", "preconditioner", PRECONDITIONERS),
        preconditioner_shift=c.real("relax", "preconditioner_shift", non_negative=True),
        saddle_check=c.boolean("relax", "saddle_check"),
        saddle_noise=c.real("relax", "saddle_noise", positive=True),
    )
    if (grid.boundary == "periodic" and relax.preconditioner in ("laplacian", "laplacian_second")
            and relax.preconditioner_shift == 0.0):
        c.fail("relax.preconditioner_shift", 0.0, "a periodic box needs a positive shift (the constant mode "
               "of the Laplacian is zero)")
    if grid.symmetry == "axial":
        _check_axial(c, grid, initial, relax)
    if any(grid.stretch) and relax.hessian_modes:
        c.fail("relax.hessian_modes", relax.hessian_modes, "the Hessian study needs a uniform grid "
               "(grid.stretch = 0); on a stretched grid its eigenproblem would need the site volumes as a metric")
    return RunSpec(grid, terms, initial, relax, dumps(merged))


def toml_inline(value: Any) -> str:
    """One TOML value on one line (inline tables and arrays), as an override's right-hand
    side; strings are escaped by tomli-w."""
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_toml_key(k)} = {toml_inline(v)}" for k, v in value.items()) + " }"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_inline(v) for v in value) + "]"
    return tomli_w.dumps({"v": value}).split("=", 1)[1].strip()


def _toml_key(key: str) -> str:
    return tomli_w.dumps({key: 0}).rsplit("=", 1)[0].strip()


def dumps(merged: dict) -> str:
    """The merged configuration as TOML text (readable back by `load`), written by tomli-w.
    Keys added after results existed are left out while they hold their default
    (grid.symmetry "none"; initial.file "", and the keys of the formula and array
    families), so the text, and the run hash from it, of a
    configuration that does not use them is what it was."""
    ordered = {table: dict(merged[table]) for table in ("grid", "initial", "relax") if table in merged}
    if ordered.get("grid", {}).get("symmetry") == "none":
        del ordered["grid"]["symmetry"]
    for key in ("file", "function", "parameters", "dataset", "spacing", "charge"):
        if key in ordered.get("initial", {}) and ordered["initial"][key] == DEFAULTS["initial"][key]:
            del ordered["initial"][key]
    ordered["terms"] = merged.get("terms", {})
    return tomli_w.dumps(ordered)

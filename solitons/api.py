"""The Python entry points, for notebooks and scripts: `relax`, `evaluate`, `load`,
`Result`, `scan`, `survey` and `gallery`.

    import solitons
    result = solitons.relax(grid={"points": 41, "spacing": 0.25})   # Q = 1, plain model
    result.energy, result.charge, result.virial, result.verdict
    figures = result.figures()                                       # matplotlib figures
    result.to_html("view.html")                                      # interactive 3D page
    table = solitons.scan("scan.toml")                               # a pandas DataFrame

`scan` and `survey` return pandas DataFrames, one row per point or run, with the columns
of the command's scan.csv / survey.csv: notebooks filter, sort and plot them directly, and
``table.to_dict("records")`` gives plain records.  (pandas comes with xarray anyway.)

`relax` takes the configuration as a path, TOML text, a dict (the TOML tables) or
nothing (the defaults), and overrides as keyword arguments, one per table
(``grid={"points": 48}``, ``terms={"mass": {"kind": "potential", "coupling": 0.5}}``).
It writes files only when ``out`` is given; otherwise nothing touches the disk and the
record stays in memory (`solitons.run.relax_record` returns it either way).  Errors are the command's: `solitons.config.ConfigError`
for bad input (naming key and value), `solitons.run.RunError` when a run cannot start.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path
from typing import Any

from solitons.lattice.grid import Grid
from solitons.record import Result

__all__ = ["Result", "evaluate", "gallery", "load", "relax", "scan", "survey"]


def load(path: str | Path) -> Result:
    """A result written by `relax` or the command: ``path`` is a result.h5 file or the
    run directory holding one."""
    from solitons.io.results import read_result

    path = Path(path)
    if path.is_dir():
        path = path / "result.h5"
    data = read_result(path)
    return Result(data["summary"], data["field"], data["grid"], data["energy_density"], data["history"],
                  data["config"], path.parent)


def _overrides(tables: dict[str, Any]) -> list[str]:
    from solitons.config import toml_inline

    items = []
    for table, entries in tables.items():
        if not isinstance(entries, dict):
            items.append(f"{table}={toml_inline(entries)}")  # let the config name the problem
            continue
        for key, value in entries.items():
            if table == "terms" and isinstance(value, dict):
                items += [f"terms.{key}.{sub}={toml_inline(v)}" for sub, v in value.items()]
            else:
                items.append(f"{table}.{key}={toml_inline(value)}")
    return items


def _spec(config, tables: dict[str, Any]):
    import tomli_w

    from solitons.config import load as load_config

    overrides = _overrides(tables)
    if config is None:
        return load_config(None, overrides, text="")
    if isinstance(config, dict):
        return load_config(None, overrides, text=tomli_w.dumps(config))
    if isinstance(config, Path) or (isinstance(config, str) and "\n" not in config and "=" not in config):
        return load_config(config, overrides)
    return load_config(None, overrides, text=str(config))


def relax(config: str | Path | dict | None = None, out: str | Path | None = None, *, resume: bool = False,
          overwrite: bool = False, progress: bool = False, initial=None, **tables) -> Result:
    """Relax one configuration and return its Result.

    config: a TOML file path, TOML text, a dict of tables, or None (the defaults).
    out: a directory for result.h5, summary.json and the XDMF sidecar (none is written
    when None).  resume / overwrite: as the command's --resume / --overwrite.
    progress: print progress lines to stderr.  initial: a field of shape
    (Nx, Ny, Nz, 3) on the configured grid to start from instead of the configured
    initial data (the configuration's [initial] still names the expected charge).
    Keyword arguments override tables, e.g.
    ``grid={"points": 48}``, ``relax={"max_steps": 500}``,
    ``terms={"mass": {"kind": "potential", "coupling": 0.5}}``."""
    from solitons.run import relax_record

    if isinstance(initial, dict):  # the [initial] table, as any other keyword table
        tables, initial = {**tables, "initial": initial}, None
    spec = _spec(config, tables)
    stream = sys.stderr if progress else None
    if initial is not None:
        from solitons.assemble import make_grid
        from solitons.evaluation import check_field

        try:
            initial = check_field(initial, make_grid(spec))
        except ValueError as error:
            from solitons.run import RunError

            raise RunError(f"initial: {error}") from None
    return relax_record(spec, out, resume=resume, overwrite=overwrite, stream=stream, initial_field=initial)


def evaluate(field, config: str | Path | dict | None = None, *, grid: Grid | dict | None = None, **tables):
    """The energy per term, density, Hopf charge, virial, largest and RMS force, label and
    trust measures of ``field`` (an (Nx, Ny, Nz, 3) array, normalised to unit length)
    without relaxing it: a `solitons.evaluation.Evaluation`.

    The model (terms, scheme) and, unless ``grid`` is given, the grid come from the
    configuration as in `relax` (``grid={"points": 41, "spacing": 0.25}``,
    ``terms={...}``); ``grid`` may instead be a `solitons.lattice.grid.Grid` of the field's
    own sites."""
    from solitons.assemble import make_grid, make_model
    from solitons.evaluation import evaluate_field

    if isinstance(grid, dict):  # the [grid] table, as in `relax`
        tables, grid = {**tables, "grid": grid}, None
    spec = _spec(config, tables)
    sites = grid if grid is not None else make_grid(spec)
    return evaluate_field(make_model(spec, sites), field)


def _campaign_file(config, scratch: Path, name: str) -> Path:
    """A campaign configuration as a file: a path is used as it is; TOML text or a dict is
    written to ``scratch/name.toml`` with relative user-term file paths made absolute
    from the working directory (where they would be looked up for text)."""
    import tomllib

    import tomli_w

    from solitons.config import ConfigError

    if isinstance(config, Path) or (isinstance(config, str) and "\n" not in config and "=" not in config):
        return Path(config)
    if isinstance(config, dict):
        tables = config
    else:
        try:
            tables = tomllib.loads(str(config))
        except tomllib.TOMLDecodeError as error:
            raise ConfigError("TOML text", "(syntax)", str(error), "is not valid TOML") from None
    tables = {k: (dict(v) if isinstance(v, dict) else v) for k, v in tables.items()}
    for term in (tables.get("terms") or {}).values():
        if isinstance(term, dict) and isinstance(term.get("file"), str) and not Path(term["file"]).is_absolute():
            term["file"] = str(Path.cwd() / term["file"])
    scratch.mkdir(parents=True, exist_ok=True)
    path = scratch / f"{name}.toml"
    path.write_text(tomli_w.dumps(tables), encoding="utf-8")
    return path


def _campaign(kind: str, config, out, scheduler, workers, progress, figures, tables):
    import pandas as pd

    from solitons.io.results import check_output_dir

    stream = sys.stderr if progress else None
    overrides = _overrides(tables)
    with tempfile.TemporaryDirectory(prefix=f"solitons-{kind}-") as scratch:
        path = _campaign_file(config, Path(scratch), kind)
        target = check_output_dir(out) if out is not None else Path(scratch) / "out"
        if kind == "scan":
            from solitons.campaigns.scan import run_scan

            rows = run_scan(path, target, overrides, stream=stream, figures=figures and out is not None,
                            scheduler=scheduler, workers=workers)
        else:
            from solitons.campaigns.survey import run_survey

            rows = run_survey(path, target, overrides, scheduler=scheduler, workers=workers, stream=stream,
                              figure=figures and out is not None)
        table = pd.DataFrame.from_records(rows)
    if out is None and "path" in table:
        table = table.drop(columns="path")  # the run directories went with the scratch folder
    return table


def scan(config, out: str | Path | None = None, *, scheduler: str | None = "inline", workers: int | None = None,
         progress: bool = False, figures: bool = True, **tables):
    """Relax every point of a coupling scan ([scan] table) and return the table as a
    pandas DataFrame: one row per point with the scanned value(s), E and each term's
    energy (E[name]), hopf_charge, virial, size, core_thickness, boundary_fraction,
    verdict, label, converged, iterations, skipped (finished earlier: same run hash).

    config: a path, TOML text or a dict with a [scan] table.  out: a directory for the
    runs, scan.csv and the figures (rerunning skips finished points); when None the runs
    go to a temporary folder and only the table is kept.  scheduler: "inline" (default
    here: this process, one point after another), None for a local dask cluster of
    ``workers`` processes, or the address of a running scheduler.  Keyword arguments
    override tables as in `relax`."""
    return _campaign("scan", config, out, scheduler, workers, progress, figures, tables)


def survey(config, out: str | Path | None = None, *, scheduler: str | None = "inline", workers: int | None = None,
           progress: bool = False, figures: bool = True, **tables):
    """Relax every family and seed of a survey ([survey] table) and return the table as a
    pandas DataFrame: one row per run with Q, family, seed, label, energy,
    energy_per_q34, measured_Q, verdict, converged, lowest (the lowest energy of its
    charge), status.  Arguments as for `scan`."""
    return _campaign("survey", config, out, scheduler, workers, progress, figures, tables)


def gallery(results, level: float | None = None, columns: int = 4):
    """One matplotlib figure with the isosurface of every result (Result objects or
    paths), a shared phase colour bar, each panel zoomed to its soliton."""
    from solitons.views import plots

    entries = []
    for item in results:
        result = item if isinstance(item, Result) else load(item)
        entries.append({"field": result.field, "grid": result.grid, "label": result.summary.get("label"),
                        "hopf_charge": result.charge, "energy": result.energy,
                        "model": result.summary.get("model")})
    return plots.plot_gallery(entries, None, columns=columns, level=plots.DEFAULT_LEVEL if level is None else level)

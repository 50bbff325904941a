"""What decides a run's numbers and where they come from: configuration hashes (a resume
and a campaign's skip test compare them), user-term file hashes, package, git and library
versions."""

from __future__ import annotations

import functools
import hashlib
import json
import sys
import tomllib
from pathlib import Path

from solitons import __version__
from solitons.config import USER_KIND, RunSpec


def config_hash(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def user_files(spec: RunSpec) -> list[dict]:
    """The user-term files of a run: term name, path, SHA-256 and content (text)."""
    files = []
    for term in spec.terms:
        if term.kind == USER_KIND:
            data = Path(term.file).read_bytes()
            files.append({"term": term.name, "file": term.file, "sha256": hashlib.sha256(data).hexdigest(),
                          "content": data.decode("utf-8", errors="replace")})
    return files


def run_hash(spec: RunSpec) -> str:
    """What decides a run's numbers: the merged configuration and the content of every
    user-term file it loads (and of the start field's file, for the formula and array
    families).  Campaigns skip a finished run only when this is unchanged."""
    digest = hashlib.sha256(spec.text.encode())
    for entry in user_files(spec):
        digest.update(entry["sha256"].encode())
    if spec.initial.family in ("formula", "array"):  # the start field's file decides the numbers too
        digest.update(hashlib.sha256(Path(spec.initial.part["file"]).read_bytes()).hexdigest().encode())
    return digest.hexdigest()[:16]


@functools.lru_cache(maxsize=1)
def _git_commit() -> dict:
    """The commit of the package's source tree when it is a git checkout (an editable
    install), with whether tracked files differ from it; {} otherwise."""
    import subprocess

    where = Path(__file__).resolve().parent
    try:
        commit = subprocess.run(["git", "-C", str(where), "rev-parse", "HEAD"], capture_output=True, text=True,
                                timeout=10)
        if commit.returncode != 0:
            return {}
        dirty = subprocess.run(["git", "-C", str(where), "status", "--porcelain", "--untracked-files=no"],
                               capture_output=True, text=True, timeout=10)
        return {"git_commit": commit.stdout.strip(), "git_dirty": bool(dirty.stdout.strip())}
    except (OSError, subprocess.SubprocessError):
        return {}


def provenance(spec: RunSpec) -> dict:
    """Where a result's numbers come from: package version (and git commit), Python and
    library versions, and every user-term file with its hash and content."""
    from importlib import metadata

    versions = {}
    for name in ("jax", "jaxlib", "numba", "numpy", "scipy", "h5py"):
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return {"solitons": __version__, **_git_commit(), "python": sys.version.split()[0], "libraries": versions,
            "user_terms": user_files(spec)}


def physics_hash(text: str) -> str:
    """Hash of what defines the field being relaxed (grid, terms, initial data): a resumed
    run may change the [relax] settings (more steps, other tolerances), nothing else."""
    data = tomllib.loads(text)
    data.pop("relax", None)
    return hashlib.sha256(json.dumps(data, sort_keys=True).encode()).hexdigest()[:16]

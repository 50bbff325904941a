"""Peak memory per grid point of a relaxation step (value_and_grad plus the L-BFGS
history), measured as the growth of the process's peak resident set in a fresh
subprocess per case.  The driver's BYTES_PER_POINT guard comes from this table.

Models: the default (dirichlet + skyrme_faddeev: the fused kernel) on each scheme; on the
sixth-order scheme, plus the built-in log_quartic (the staged kernel), plus user-file
copies of log_quartic and of laplacian_squared (tests/user_copies.py: the staged kernel
with the compiled pointwise evaluator, which holds the local fields of every site, 33 rows
with a Laplacian term, and their 24 derivative rows).

    python analysis/bench_memory.py > analysis/bench_memory.txt
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

CASE = r"""
import json, resource, sys
import numpy as np
import solitons
from solitons.config import load
from solitons.run import make_grid, make_model, make_initial_field
from solitons.relaxation.minimise import StoppingRule, minimise
points, scheme = int(sys.argv[1]), sys.argv[2]
overrides = [f"grid.points={points}", f"grid.scheme={scheme!r}".replace("'", '"')] + sys.argv[3:]
spec = load(None, overrides, text="")
grid = make_grid(spec)
model = make_model(spec, grid)
field = make_initial_field(spec, grid)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
minimise(model, field, "lbfgs", StoppingRule(max_steps=12, force_tol=0.0))
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps({"points": points, "scheme": scheme, "bytes_per_point": (after - before) / grid.npoints,
                  "peak_bytes": after}))
"""


COPIES = Path(__file__).parents[1] / "tests" / "user_copies.py"
MODELS = {
    "default": [],
    "+ log_quartic": ['terms.log_quartic.coupling=0.2'],
    "+ user log_quartic": ['terms.lq.kind="user"', f'terms.lq.file="{COPIES}"', 'terms.lq.function="log_quartic"',
                           'terms.lq.coupling=0.2'],
    "+ user laplacian_squared": ['terms.ls.kind="user"', f'terms.ls.file="{COPIES}"',
                                 'terms.ls.function="laplacian_squared"', 'terms.ls.laplacian=true',
                                 'terms.ls.coupling=0.05'],
}
CASES = ([("default", scheme, points) for scheme in ("second", "fourth", "sixth") for points in (64, 96)]
         + [(model, "sixth", points) for model in list(MODELS)[1:] for points in (64, 96, 128)])


def main() -> None:
    print("model                     N    scheme  bytes/point  peak RSS (MiB)")
    for model, scheme, points in CASES:
        out = subprocess.run([sys.executable, "-c", CASE, str(points), scheme] + MODELS[model],
                             capture_output=True, text=True, check=True).stdout
        row = json.loads(out.strip().splitlines()[-1])
        print(f"{model:24s} {points:4d} {scheme:7s} {row['bytes_per_point']:10.0f}  {row['peak_bytes'] / 2**20:10.0f}",
              flush=True)


if __name__ == "__main__":
    main()

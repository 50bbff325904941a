"""Peak memory per grid point of a relaxation step (jitted value_and_grad plus the
L-BFGS history), measured as the growth of the process's peak resident set in a fresh
subprocess per case.  The driver's BYTES_PER_POINT guard comes from this table.

    python analysis/bench_memory.py
"""

from __future__ import annotations

import json
import subprocess
import sys

CASE = r"""
import json, resource, sys
import numpy as np
import solitons
from solitons.config import load
from solitons.driver import make_grid, make_model, make_initial_field
from solitons.minimise import StoppingRule, minimise
points, scheme = int(sys.argv[1]), sys.argv[2]
spec = load(None, [f"grid.points={points}", f"grid.scheme={scheme!r}".replace("'", '"')], text="")
grid = make_grid(spec)
model = make_model(spec, grid)
field = make_initial_field(spec, grid)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
minimise(model, field, "lbfgs", StoppingRule(max_steps=12, force_tol=0.0))
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps({"points": points, "scheme": scheme, "bytes_per_point": (after - before) / grid.npoints,
                  "peak_bytes": after}))
"""


def main() -> None:
    print("N    scheme  bytes/point  peak RSS (MiB)")
    for scheme in ("second", "fourth"):
        for points in (48, 64, 96):
            out = subprocess.run([sys.executable, "-c", CASE, str(points), scheme],
                                 capture_output=True, text=True, check=True).stdout
            row = json.loads(out.strip().splitlines()[-1])
            print(f"{points:4d} {scheme:7s} {row['bytes_per_point']:10.0f}  {row['peak_bytes'] / 2**20:10.0f}",
                  flush=True)


if __name__ == "__main__":
    main()

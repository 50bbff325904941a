"""solitons: relax knotted solitons of corrected sigma models on a 3D lattice."""

import signal as _signal
import threading as _threading

# Importing jax swallows a Ctrl-C that arrives meanwhile (measured: a SIGINT 0.1-0.6 s
# into `import jax` neither interrupted the import nor anything after it).  Signals that
# arrive during the import are recorded here instead; the command
# (solitons.interrupts.handling) acts on them as soon as it starts.
EARLY_SIGNALS: list[int] = []
_previous = {}
if _threading.current_thread() is _threading.main_thread():
    _previous = {s: _signal.signal(s, lambda signum, _frame: EARLY_SIGNALS.append(signum))
                 for s in (_signal.SIGINT, _signal.SIGTERM)}
try:
    import jax

    jax.config.update("jax_enable_x64", True)
finally:
    for _s, _h in _previous.items():
        _signal.signal(_s, _h)

__version__ = "0.1.0"

__all__ = ["Result", "evaluate", "gallery", "load", "relax", "scan", "survey"]


def __getattr__(name):
    """`relax`, `evaluate`, `load`, `Result`, `scan`, `survey` and `gallery` (solitons.api), imported on first use so that the
    command's --help and its signal handling start before numba loads."""
    if name in __all__:
        from solitons import api

        return getattr(api, name)
    raise AttributeError(f"module 'solitons' has no attribute {name!r}")

"""The records of the fast route's terms: every record names a built-in kind with the
parameters its packing reads, the packed entries are the continuum constants of the term's
formula (docs/terms.md: mass^2 (1 - n3)^power; H^2 (c0 + c1 ln((H^2 + delta scale^4) /
scale^4))), and the limits the configuration applies come from the term kinds.  That the
route with each record equals the reference jax energy is tests/test_routes.py."""

import pytest

from solitons.config import ConfigError, load
from solitons.model.routes import fast_terms
from solitons.model.terms import BUILTIN_TERMS


def test_every_record_is_a_builtin_kind_and_packs_its_own_parameters():
    assert len(fast_terms.COEFFICIENTS) == len(set(fast_terms.COEFFICIENTS))
    for kind, record in fast_terms.FAST_TERMS.items():
        values = dict(BUILTIN_TERMS[kind].parameters)  # the defaults: every key the packing may read
        assert len(record.pack(2.0, values)) == len(record.packed)


def test_packing_follows_the_formulas():
    coefs = [0.0] * len(fast_terms.COEFFICIENTS)
    fast_terms.pack(coefs, "potential", 0.5, {"mass": 3.0, "power": 2.0})
    fast_terms.pack(coefs, "log_quartic", 0.2, {"c0": 1.0, "c1": 0.1, "scale": 2.0, "delta": 1e-8})
    at = {name: coefs[i] for i, name in enumerate(fast_terms.COEFFICIENTS)}
    assert at["potential"] == 0.5 * 9.0 and at["potential_power"] == 2.0
    assert at["log_quartic"] == 0.2 and at["log_scale4"] == 16.0 and at["log_delta"] == 1e-8


@pytest.mark.parametrize("term, key", [
    ("kind = 'potential', power = 0.5", "terms.extra.power"),
    ("kind = 'log_quartic', scale = 0.0", "terms.extra.scale"),
    ("kind = 'log_quartic', delta = -1e-8", "terms.extra.delta"),
])
def test_limits_come_from_the_term(term, key):
    with pytest.raises(ConfigError) as error:
        load(None, text="[terms.extra]\n" + term.replace(", ", "\n") + "\n")
    assert error.value.key == key
    kind = BUILTIN_TERMS[term.split("'")[1]]
    sub = key.rsplit(".", 1)[1]
    assert kind.violations({sub: error.value.value})

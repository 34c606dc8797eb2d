"""``sequencer.procedure`` resolves its public names lazily (PEP 562): reading a stored limit set
(``procedure.limits``, as ``verify`` does) does not import the loader, the expander or the JSON
schemas, and every public name still resolves to the object its module defines.  Module names in
``sys.modules`` of a new interpreter: membership, no timing."""

from __future__ import annotations

import json
import subprocess
import sys

import sequencer.procedure as procedure

PROBE = """
import json, sys
import sequencer.procedure.limits
print(json.dumps(sorted(m for m in sys.modules if m.startswith("sequencer.procedure"))))
"""


def test_reading_limits_leaves_the_loader_and_the_schemas_unimported() -> None:
    done = subprocess.run([sys.executable, "-c", PROBE], capture_output=True, text=True, timeout=120,
                          check=True)
    loaded = set(json.loads(done.stdout))
    assert "sequencer.procedure.limits" in loaded
    assert {f"sequencer.procedure.{m}" for m in ("loader", "expand", "schema", "batch", "fragments")} & loaded == set()
    # nor the expression language (checking, expressions, values): limits need only the key checks
    assert {f"sequencer.procedure.{m}" for m in ("checking", "expressions", "values")} & loaded == set()
    assert "sequencer.procedure.keys" in loaded


def test_every_public_name_resolves_to_its_modules_object() -> None:
    from sequencer.procedure import limits, loader, units

    assert procedure.load_procedure is loader.load_procedure
    assert procedure.load_limits is limits.load_limits
    assert procedure.UnitError is units.UnitError
    assert set(procedure.__all__) <= set(dir(procedure))
    for name in procedure.__all__:
        assert getattr(procedure, name) is not None

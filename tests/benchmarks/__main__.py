"""Run every benchmark: ``python -m tests.benchmarks [--json FILE] [--only NAME]``.

Each module ``tests/benchmarks/bench_*.py`` exposes ``run() -> list[dict]``; each row has the keys
``name, ours, baseline, unit, ratio, goal, verdict`` (verdict ``met`` or ``short``; ``baseline`` and
``ratio`` may be None for an absolute goal).  The baseline of every row is measured in the same run.
"""

from __future__ import annotations

import argparse
import importlib
import json
import pkgutil
import platform
import sys
from pathlib import Path


def _modules(only: str | None) -> list[str]:
    here = Path(__file__).parent
    names = sorted(m.name for m in pkgutil.iter_modules([str(here)]) if m.name.startswith("bench_"))
    if only:
        names = [n for n in names if only in n]
    return names


def _fmt(v: object) -> str:
    if v is None:
        return "—"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tests.benchmarks")
    ap.add_argument("--json", type=Path, default=None, help="also write the table as JSON")
    ap.add_argument("--only", default=None, help="run only benchmark modules whose name contains this")
    args = ap.parse_args(argv)
    rows: list[dict] = []
    for name in _modules(args.only):
        mod = importlib.import_module(f"tests.benchmarks.{name}")
        print(f"running {name} ...", file=sys.stderr, flush=True)
        rows.extend(mod.run())
    cols = ["name", "ours", "baseline", "unit", "ratio", "goal", "verdict"]
    table = [[_fmt(r.get(c)) for c in cols] for r in rows]
    widths = [max(len(c), *(len(t[i]) for t in table)) if table else len(c) for i, c in enumerate(cols)]
    print(f"machine: {platform.machine()}, {platform.processor() or platform.system()}, python {platform.python_version()}")
    print("  ".join(c.ljust(w) for c, w in zip(cols, widths, strict=True)))
    for t in table:
        print("  ".join(v.ljust(w) for v, w in zip(t, widths, strict=True)))
    if args.json:
        args.json.write_text(json.dumps(rows, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""Run every benchmark: ``python -m tests.benchmarks [--json FILE] [--markdown] [--only NAME]``.

Each module ``tests/benchmarks/bench_*.py`` exposes ``run() -> list[dict]``; each row has the keys
``name, ours, baseline, unit, ratio, goal, verdict`` (verdict ``met`` or ``short``; ``baseline`` and
``ratio`` may be None for an absolute goal).  The baseline of every row is measured in the same run.
The table is printed with the machine it ran on; ``--json FILE`` writes the same rows as a list of
objects with exactly those keys (a row's extra keys, e.g. a breakdown, are printed only).
Benchmarks are not tests: pytest does not collect ``bench_*.py``.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import pkgutil
import platform
import sys
from pathlib import Path

COLUMNS = ("name", "ours", "baseline", "unit", "ratio", "goal", "verdict")
VERDICTS = ("met", "short")


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


def _checked(module: str, row: dict) -> dict:
    """The row with exactly the table's keys; a malformed row stops the run (no silent gap)."""
    missing = [c for c in COLUMNS if c not in row]
    if missing or row["verdict"] not in VERDICTS or row["ours"] is None:
        raise SystemExit(f"{module}: malformed row {row!r} (missing {missing or 'nothing'})")
    return {c: row[c] for c in COLUMNS}


def machine() -> str:
    """CPU model, cores, OS and Python: the machine the figures belong to."""
    model = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    load = ""
    if hasattr(os, "getloadavg"):
        load = f", load average {os.getloadavg()[0]:.2f} at start"
    return (
        f"{model}, {os.cpu_count()} logical CPUs, {platform.system()} {platform.release()}, "
        f"Python {platform.python_version()}{load}"
    )


def plain_table(rows: list[dict]) -> str:
    table = [[_fmt(r[c]) for c in COLUMNS] for r in rows]
    widths = [max(len(c), *(len(t[i]) for t in table)) for i, c in enumerate(COLUMNS)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(COLUMNS, widths, strict=True))]
    lines += ["  ".join(v.ljust(w) for v, w in zip(t, widths, strict=True)) for t in table]
    return "\n".join(line.rstrip() for line in lines)


def markdown_table(rows: list[dict]) -> str:
    lines = ["| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
    for r in rows:
        lines.append("| " + " | ".join(_fmt(r[c]).replace("|", "\\|") for c in COLUMNS) + " |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tests.benchmarks")
    ap.add_argument("--json", type=Path, default=None, help="also write the table as JSON")
    ap.add_argument("--markdown", action="store_true", help="print the table as Markdown")
    ap.add_argument(
        "--only", default=None, help="run only benchmark modules whose name contains this"
    )
    args = ap.parse_args(argv)
    where = machine()
    rows: list[dict] = []
    for name in _modules(args.only):
        mod = importlib.import_module(f"tests.benchmarks.{name}")
        print(f"running {name} ...", file=sys.stderr, flush=True)
        rows.extend(_checked(name, row) for row in mod.run())
    print(f"machine: {where}")
    print(markdown_table(rows) if args.markdown else plain_table(rows))
    if args.json:
        args.json.write_text(json.dumps(rows, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""The table of step kinds in docs/procedures.md, written from ``kinds.KINDS``.

``python -m sequencer.procedure.kinds_doc docs/procedures.md`` rewrites the table at the end of the
guide (everything from its header row on) after a kind is added or changed; the guide's test
(``tests/docs/test_guides.py``) fails while the table and the kinds differ.
"""

from __future__ import annotations

import sys
from pathlib import Path

from .kinds import CANONICAL_UNIT, KINDS, Arg

HEADER = "| kind | role | arguments | what it does |"
_WRITTEN: dict[str, str] = {
    "voltage": "voltage (mV, V)",
    "bias_voltage": "bias voltage (V)",
    "time": "time (ns, us)",
    "duration": "duration (ms, s)",
    "frequency": "frequency (Hz, kHz, MS/s)",
    "slew": "ramp rate (V/s)",
    "current": "current (uA, nA)",
    "percent": "percent (%)",
    "int": "count",
    "float": "number",
    "bool": "true/false",
    "str": "text",
    "name": "name",
    "names": "names",
    "ints": "counts",
}


def _argument(arg: Arg) -> str:
    text = f"`{arg.name}` {_WRITTEN[arg.dimension]}"
    if not arg.required:
        default = arg.default
        if default is not None and arg.dimension in CANONICAL_UNIT:
            default = f"{default:g} {CANONICAL_UNIT[arg.dimension]}"
        text += " — optional" + (f", default {default}" if default is not None else "")
    if arg.choices:
        text += " — one of " + ", ".join(arg.choices)
    return text


def kinds_table() -> str:
    """The markdown table: kind, role, arguments with their units, what it does (and produces)."""
    rows = [HEADER, "| --- | --- | --- | --- |"]
    for kind in KINDS.values():
        arguments = "; ".join(_argument(a) for a in kind.args) or "none"
        what = kind.doc.replace("|", "/")
        if kind.produces:
            what += " → " + ", ".join(f"`{q}`" for q in kind.produces)
        if kind.hazard:
            what += " (**hazard**)"
        rows.append(f"| `{kind.name}` | {kind.role or '—'} | {arguments} | {what} |")
    return "\n".join(rows) + "\n"


def rewrite(guide: Path) -> bool:
    """Replace the table at the end of ``guide``; True when the text changed."""
    text = guide.read_text(encoding="utf-8")
    if HEADER not in text:
        raise ValueError(f"{guide}: no table of step kinds (a line {HEADER!r})")
    new = text[: text.index(HEADER)] + kinds_table()
    if new == text:
        return False
    guide.write_text(new, encoding="utf-8")
    return True


if __name__ == "__main__":
    for name in sys.argv[1:] or ["docs/procedures.md"]:
        print(f"{name}: {'rewritten' if rewrite(Path(name)) else 'up to date'}")

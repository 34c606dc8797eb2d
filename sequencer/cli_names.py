"""A batch or board name that no run in the database carries is a mistake, not an empty answer.

``runs --batch NOPE`` printed an empty table and ``export --board NR-PA8-1O1`` a header, both with
exit 0: a typo looked like a batch with no runs.  When a filtered listing comes back empty, the
names given are looked up; one the database does not know is refused (``OptionError``, exit 2) with
the known names and a match in other letter case.  A known name that the other filters exclude
stays an empty answer.  Only an empty result pays for the look-up.
"""

from __future__ import annotations

from typing import Any

from sequencer.errors import OptionError

MAX_LISTED = 20


def refuse_unknown_names(listing: Any, *, batch: str | None = None, board: str | None = None) -> None:
    """``OptionError`` naming each of ``batch`` and ``board`` that no run in ``listing`` carries."""
    lines: list[str] = []
    if batch is not None:
        known = [b.batch for b in listing.batch_lines()]
        lines += _unknown("--batch", "batch", batch, known, "none (no run was given --batch)", "batches")
    if board is not None:
        known = sorted({r.board for r in listing.run_lines()})
        lines += _unknown("--board", "board", board, known, "none (no runs yet)", "boards")
    if lines:
        raise OptionError(*lines)


def _unknown(
    option: str, what: str, name: str, known: list[str], nothing: str, plural: str
) -> list[str]:
    if name in known:
        return []
    same = [k for k in known if k.casefold() == name.casefold()]
    hint = f"; did you mean {same[0]!r}?" if same else ""
    shown = ", ".join(known[:MAX_LISTED]) + (f" ... ({len(known)} in all)" if len(known) > MAX_LISTED else "")
    return [f"{option}: no {what} {name!r} in the database{hint}", f"known {plural}: {shown or nothing}"]

"""The placements as a terminal table."""

from __future__ import annotations

import textwrap
from typing import TYPE_CHECKING

from vinstrata.place.limits import CAUTION, SULFITE_LINES, VA_EXCEPTIONS
from vinstrata.place.placing import INDICATION, Placements
from vinstrata.read.lots import UNASSIGNED, USED

if TYPE_CHECKING:
    from vinstrata.place.stream import PlaceTally


def describe(placements: Placements, width: int = 100, limit: int = 60,
             tally: PlaceTally | None = None) -> str:
    """The placements as a terminal table readable at ``width`` columns.

    With ``tally`` (a file placed in batches) the table shows ``tally.head``
    and the counts are the tally's, over every batch.
    """
    if tally is not None and tally.head is not None:
        placements = tally.head
    lots = placements.lots
    used = lots[lots["status"] == USED]
    details = placements.details.set_index("lot_id") if len(placements.details) else None
    head_row = f"{'lot':<13} {'style':<10} {'memb':>4} {'atyp':<4} {'band':<10} flags"
    lines = [head_row, "-" * width]
    for row in used.head(limit).itertuples():
        words = (str(details.loc[row.lot_id, "flags_short"]) if details is not None else "")
        words = words or "-"  # the table shows "-" where no flag is earned; the CSV is empty
        style = row.style if row.style != UNASSIGNED else "no style"
        band = (f"{row.indicative_band[:6]} {row.share_top:.0%}" if row.indicative_band
                else "-")
        mark = "YES" if row.atypical else ""
        head = f"{str(row.lot_id)[:13]:<13} {style:<10} {row.membership:>4.2f} {mark:<4} " \
               f"{band[:10]:<10} "
        room = width - len(head)
        chunks, line = [], ""
        for word in str(words).split(" "):
            if line and len(line) + 1 + len(word) > room:
                chunks.append(line)
                line = word
            else:
                line = f"{line} {word}".strip()
        chunks.append(line)
        lines.append(head + chunks[0])
        lines += [" " * len(head) + c for c in chunks[1:]]
    rejected = lots[lots["status"] != USED]
    n_used, n_atypical, n_rejected, n_label = (
        (tally.used, tally.atypical, tally.rejected, tally.sulfite) if tally is not None else
        (len(used), int(used["atypical"].astype(bool).sum()), len(rejected),
         int(used["flags"].str.contains("sulfite_statement", regex=False).sum())))
    if n_used > limit:
        lines.append(f"... {n_used - limit} more lots in placements.csv")
    lines.append("-" * width)
    line = SULFITE_LINES.get(placements.settings.market)
    lines += textwrap.wrap(
        f"{n_used} lots placed, {n_atypical} atypical, "
        f"{n_rejected} rejected; {n_label} flagged for a sulfite statement"
        + (f" ({line})." if line else "."), width)
    for row in rejected.head(10).itertuples():
        lines.append(f"  rejected: {row.lot_id or '(no id)'}: {row.status}")
    notes = [f"band: the band most of its neighbours got, and the share of them in the top "
             f"band ({INDICATION}).", CAUTION, VA_EXCEPTIONS]
    for note in notes:
        lines += textwrap.wrap(note, width)
    return "\n".join(lines)

"""The placements as a terminal table."""

from __future__ import annotations

import textwrap

from vinstrata.place.limits import CAUTION, SULFITE_LINES, VA_EXCEPTIONS
from vinstrata.place.placing import INDICATION, Placements
from vinstrata.read.lots import UNASSIGNED, USED


def describe(placements: Placements, width: int = 100, limit: int = 60) -> str:
    """The placements as a terminal table readable at ``width`` columns."""
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
    if len(used) > limit:
        lines.append(f"... {len(used) - limit} more lots in placements.csv")
    rejected = lots[lots["status"] != USED]
    lines.append("-" * width)
    n_label = int(used["flags"].str.contains("sulfite_statement", regex=False).sum())
    line = SULFITE_LINES.get(placements.settings.market)
    lines += textwrap.wrap(
        f"{len(used)} lots placed, {int(used['atypical'].astype(bool).sum())} atypical, "
        f"{len(rejected)} rejected; {n_label} flagged for a sulfite statement"
        + (f" ({line})." if line else "."), width)
    for row in rejected.head(10).itertuples():
        lines.append(f"  rejected: {row.lot_id or '(no id)'}: {row.status}")
    notes = [f"band: the band most of its neighbours got, and the share of them in the top "
             f"band ({INDICATION}).", CAUTION, VA_EXCEPTIONS]
    for note in notes:
        lines += textwrap.wrap(note, width)
    return "\n".join(lines)

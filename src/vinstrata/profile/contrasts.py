"""Where drivers differ between styles, and where the pooled range misleads."""

from __future__ import annotations

import pandas as pd

from vinstrata.profile.groups import POOLED

CONTRAST_COLUMNS = ("analyte", "kind", "styles", "sentence")


def _say_side(higher: bool, label: str) -> str:
    return f"{'higher' if higher else 'lower'} {label}"


def _names(styles: list[str]) -> str:
    if len(styles) <= 2:
        return " and ".join(styles)
    return ", ".join(styles[:-1]) + " and " + styles[-1]


def contrasts(drivers: pd.DataFrame, labels: dict[str, str]) -> pd.DataFrame:
    """Where drivers differ between trusted styles, and where the pooled range misleads.

    Kinds (per analyte):

    * ``reversal``: a driver in opposite directions in two or more trusted styles;
    * ``style_specific``: a driver (one direction) in some trusted styles and no
      clear effect in other trusted styles with enough lots;
    * ``pooled_misleading``: the pooled range is not a driver, or points the other
      way, while trusted styles show drivers; or the pooled range shows a driver
      that no trusted style shows (a difference between styles dressed as a
      quality driver).
    """
    rows = []
    within = drivers[(drivers["style"] != POOLED) & drivers["trusted"].astype(bool)]
    pooled = drivers[drivers["style"] == POOLED].set_index("analyte")
    for analyte in dict.fromkeys(drivers["analyte"]):
        label = labels.get(analyte, analyte)
        mine = within[within["analyte"] == analyte]
        evaluated = mine[mine["cliffs_delta"].notna()]
        up = list(evaluated[evaluated["is_driver"] & (evaluated["cliffs_delta"] > 0)]["style"])
        down = list(evaluated[evaluated["is_driver"] & (evaluated["cliffs_delta"] < 0)]["style"])
        flat = list(evaluated[~evaluated["is_driver"].astype(bool)]["style"])
        p = pooled.loc[analyte] if analyte in pooled.index else None
        p_driver = bool(p is not None and p["is_driver"])
        p_up = bool(p_driver and p["cliffs_delta"] > 0)
        pooled_words = (f"pooled, {_say_side(p_up, label)} looks better" if p_driver
                        else "pooled, no effect shows")
        flat_words = f"; in {_names(flat)} no clear effect shows" if flat else ""
        if up and down:
            rows.append({"analyte": analyte, "kind": "reversal", "styles": ";".join(up + down),
                         "sentence": f"In {_names(up)} higher {label} goes with higher grades; "
                                     f"in {_names(down)} the opposite{flat_words}; "
                                     f"{pooled_words}."})
        elif (up or down) and flat:
            side = up or down
            rows.append({"analyte": analyte, "kind": "style_specific",
                         "styles": ";".join(side + flat),
                         "sentence": f"In {_names(side)} {_say_side(bool(up), label)} goes "
                                     f"with higher grades{flat_words}; {pooled_words}."})
        if up or down:
            signs = {True} if up and not down else {False} if down and not up else {True, False}
            if not p_driver or signs != {p_up}:
                side_text = "; ".join(
                    [f"inside {_names(up)} higher {label} goes with higher grades"] * bool(up)
                    + [f"inside {_names(down)} lower {label} does"] * bool(down))
                head = ("Pooled over all styles no effect shows" if not p_driver else
                        f"Pooled over all styles {_say_side(p_up, label)} looks better")
                rows.append({"analyte": analyte, "kind": "pooled_misleading",
                             "styles": ";".join([*up, *down, POOLED]),
                             "sentence": f"{head}, while {side_text}."})
        elif p_driver and len(evaluated):
            rows.append({"analyte": analyte, "kind": "pooled_misleading",
                         "styles": ";".join([*flat, POOLED]),
                         "sentence": f"Pooled over all styles {_say_side(p_up, label)} looks "
                                     f"like a driver of higher grades, but inside no trusted "
                                     f"style does {label} move with the grade: the pooled "
                                     f"effect comes from differences between styles."})
    return pd.DataFrame(rows, columns=list(CONTRAST_COLUMNS))

"""Style names from their chemistry: short, readable and unique within a fit."""

from __future__ import annotations

import pandas as pd

from vinstrata.read.analytes import KINDS_BY_KEY

NAME_Z = 0.5  # |robust z| of a style median worth naming


NAME_Z_WEAK = 0.25  # named as "moderately" when a style has fewer than two strong terms


NAME_TERMS = 3


def style_phrase(kind_key: str, label: str, z: float) -> str:
    """"high alcohol", "low pH", "deep colour", "moderately high alcohol"."""
    kind = KINDS_BY_KEY.get(kind_key)
    if kind is not None:
        word = kind.high_word if z > 0 else kind.low_word
    else:
        word = "high" if z > 0 else "low"
    if abs(z) < NAME_Z:
        word = f"moderately {word}"
    return f"{word} {label}"


def name_styles(medians_z: pd.DataFrame, labels: dict[str, tuple[str, str]]) -> dict[str, str]:
    """Short descriptive, unique names from each style's robust z of medians.

    Parameters
    ----------
    medians_z : DataFrame
        Styles x analytes, robust z of the style's median against the range.
    labels : dict
        Analyte -> (catalogue kind, readable label).

    Returns
    -------
    dict
        Style id -> name, unique within the run. Up to three analytes with
        |z| >= 0.5 are named, strongest first; a style with fewer than two
        fills up with analytes of |z| >= 0.25 ("moderately high ..."); more terms
        are added where two styles would share a name; a style with none is
        "typical of the range".
    """
    ranked = {}
    for style, row in medians_z.iterrows():
        order = row.abs().sort_values(ascending=False, kind="stable")
        strong = [a for a in order.index if abs(row[a]) >= NAME_Z]
        weak = [a for a in order.index if NAME_Z_WEAK <= abs(row[a]) < NAME_Z]
        ranked[style] = strong + weak[: max(0, 2 - len(strong))]
    names: dict[str, str] = {}
    for terms in range(NAME_TERMS, NAME_TERMS + 4):
        names = {}
        for style, row in medians_z.iterrows():
            chosen = ranked[style][:terms]
            names[str(style)] = " · ".join(
                style_phrase(labels[a][0], labels[a][1], float(row[a])) for a in chosen
            ) or "typical of the range"
        if len(set(names.values())) == len(names):
            return names
    counts: dict[str, int] = {}
    for name in names.values():
        counts[name] = counts.get(name, 0) + 1
    return {s: (n if counts[n] == 1 else f"{n} ({s})") for s, n in names.items()}

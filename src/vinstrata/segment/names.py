"""Style names: generated from their chemistry (short, readable, unique within a fit), or
given by their users.

A style's generated name names up to three analytes whose style median lies
furthest from the range's (:func:`name_styles`); with a colour column
(``limits.colour_column``) it starts with the style's colour where one colour
holds at least :data:`DOMINANT_COLOUR` (80 %) of its lots, as in "white · high
malic acid · low pH". A user may give a style a name of their own
(``vinstrata name``): it is kept in the model, ``style_name`` everywhere shows
it, and the generated phrase stays beside it (``generated_name``).
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from vinstrata.errors import InputError
from vinstrata.read.analytes import KINDS_BY_KEY

if TYPE_CHECKING:
    from vinstrata.segment.model import StyleModel

NAME_Z = 0.5  # |robust z| of a style median worth naming


NAME_Z_WEAK = 0.25  # named as "moderately" when a style has fewer than two strong terms


NAME_TERMS = 3

DOMINANT_COLOUR = 0.8  # share of a style's lots of one colour for its name to start with it
MAX_USER_NAME = 60  # characters of a name given by a user
SEPARATOR = " · "


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


def name_styles(medians_z: pd.DataFrame, labels: dict[str, tuple[str, str]],
                colours: dict[str, str] | None = None) -> dict[str, str]:
    """Short descriptive, unique names from each style's robust z of medians.

    Parameters
    ----------
    medians_z : DataFrame
        Styles x analytes, robust z of the style's median against the range.
    labels : dict
        Analyte -> (catalogue kind, readable label).
    colours : dict, optional
        Style -> its dominant colour ("" for none, :func:`colour_mix`); a name
        starts with it.

    Returns
    -------
    dict
        Style id -> name, unique within the run. Up to three analytes with
        |z| >= 0.5 are named, strongest first; a style with fewer than two
        fills up with analytes of |z| >= 0.25 ("moderately high ..."); more terms
        are added where two styles would share a name; a style with none is
        "typical of the range".
    """
    colours = colours or {}

    def dressed(style: str, name: str) -> str:
        colour = colours.get(style, "")
        return f"{colour}{SEPARATOR}{name}" if colour else name

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
            names[str(style)] = dressed(str(style), SEPARATOR.join(
                style_phrase(labels[a][0], labels[a][1], float(row[a])) for a in chosen
            ) or "typical of the range")
        if len(set(names.values())) == len(names):
            return names
    counts: dict[str, int] = {}
    for name in names.values():
        counts[name] = counts.get(name, 0) + 1
    return {s: (n if counts[n] == 1 else f"{n} ({s})") for s, n in names.items()}


def colour_mix(colours: np.ndarray) -> tuple[str, str]:
    """A style's colour mix and its dominant colour.

    Parameters
    ----------
    colours : ndarray of str
        Its lots' colours, normalised (``red``, ``white``, ``rose``; "" unknown).

    Returns
    -------
    mix : str
        ``"white 0.97; rose 0.03"``: shares of the lots of a known colour, largest
        first (ties by name), two decimals; "" when no lot has one.
    dominant : str
        The colour of at least :data:`DOMINANT_COLOUR` of those lots, or "".
    """
    known = pd.Series([c for c in colours if c], dtype=object)
    if known.empty:
        return "", ""
    shares = known.value_counts(normalize=True)
    order = sorted(shares.items(), key=lambda kv: (-kv[1], kv[0]))
    mix = "; ".join(f"{colour} {share:.2f}" for colour, share in order)
    top, share = order[0]
    return mix, (str(top) if share >= DOMINANT_COLOUR else "")


def generated_names(styles: pd.DataFrame) -> pd.Series:
    """Each style's generated name (``style_name`` of a model saved before names were
    given, which has no ``generated_name`` column)."""
    column = "generated_name" if "generated_name" in styles.columns else "style_name"
    return styles[column].astype(str)


def apply_user_names(styles: pd.DataFrame, user_names: dict[str, str]) -> pd.DataFrame:
    """The style table with ``style_name`` the user's name where given, else the generated one.

    ``generated_name`` is kept (added at the end for a table that lacks it).
    """
    out = styles.copy()
    generated = generated_names(styles)
    out["style_name"] = [user_names.get(s, g) for s, g in zip(out["style"], generated)]
    if "generated_name" not in out.columns:
        out["generated_name"] = generated.to_numpy()
    return out


def check_user_name(name: str) -> str:
    """A name a user gives a style, tidied; refuses one that cannot stand in a table.

    Raises
    ------
    InputError
        Control characters, or longer than :data:`MAX_USER_NAME` characters.
    """
    text = " ".join(str(name).split())
    if any(ord(c) < 32 or ord(c) == 127 for c in str(name).replace("\t", " ")):
        raise InputError("a style name cannot hold control characters (line breaks and the like)")
    if len(text) > MAX_USER_NAME:
        raise InputError(f"a style name has at most {MAX_USER_NAME} characters; "
                         f"'{text[:20]}...' has {len(text)}")
    return text


def with_user_name(model: StyleModel, style: str, name: str) -> StyleModel:
    """The model with ``name`` given to ``style`` ("" takes the user's name away).

    Parameters
    ----------
    model : StyleModel
    style : str
        A style id of the model (``S1`` ...).
    name : str
        The name; "" goes back to the generated one.

    Returns
    -------
    StyleModel

    Raises
    ------
    InputError
        An unknown style, a name :func:`check_user_name` refuses, or a name another
        style already shows.
    """
    if style not in model.style_ids:
        raise InputError(f"no style '{style}' in the model (styles: "
                         f"{', '.join(model.style_ids)})")
    name = check_user_name(name)
    names = {k: v for k, v in model.user_names.items() if k != style}
    if name:
        shown = apply_user_names(model.styles, names)
        taken = [s for s, n in zip(shown["style"], shown["style_name"]) if n == name and s != style]
        if taken:
            raise InputError(f"style {taken[0]} is already called '{name}'; give {style} "
                             "another name")
        names[style] = name
    names = dict(sorted(names.items()))
    return dataclasses.replace(model, user_names=names,
                               styles=apply_user_names(model.styles, names))

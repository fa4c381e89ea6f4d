"""The demo range: an invented producer's lots, from a seeded generator.

Quillory Vale Wine Co. is an invented estate; its range, styles and lots are
made up for demonstration and for planted-truth tests. Seven styles of its
own devising, each with a lab panel of thirteen analytes drawn inside
trade-typical ranges for the style (Oxford Companion to Wine, "composition";
Jackson, Wine Science) and a tasting grade on a 20-point scale.

Quality drivers are planted per style and differ on purpose:

* malic acid raises the grade of the crisp whites and lowers it in both reds
  (a reversal); pooled over the range it looks reversed or flat;
* pH lowers the grade of the crisp whites and raises it in the structured reds;
* volatile acidity lowers the grade everywhere;
* free and total SO2, potassium, phenolics and colour have no effect of their own
  inside any style; phenolics and colour differ between styles whose grades
  differ, so a pooled analysis mistakes them for drivers.

Inside a style the analytes move together as they do in wine (:data:`LINKS`),
and the grade acts on the planted (direct) drivers only, so an analyte linked
to a driver rides along with it (a passenger, ``indirect`` in
``truth_drivers.csv``, with the driver it rides on in ``rides_on``):

* density follows alcohol, sugar and the non-sugar extract (physics);
* pH follows titratable acidity (down) and potassium (up);
* total SO2 is free SO2 plus a bound part;
* colour intensity follows the phenolics in the reds;
* lactic acid rises as malic acid falls where malolactic fermentation runs
  (the barrel-aged white and both reds).

The generator is pure: the same arguments give the same tables, byte for byte
once written by :func:`write_demo`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from vinstrata.config import Config

PRODUCER = "Quillory Vale Wine Co."
ANALYTES = (
    "alcohol", "residual_sugar", "titratable_acidity", "volatile_acidity", "ph", "free_so2",
    "total_so2", "malic_acid", "lactic_acid", "potassium", "total_phenolics",
    "colour_intensity", "density",
)
DECIMALS = {
    "alcohol": 2, "residual_sugar": 1, "titratable_acidity": 2, "volatile_acidity": 2, "ph": 2,
    "free_so2": 0, "total_so2": 0, "malic_acid": 2, "lactic_acid": 2, "potassium": 0,
    "total_phenolics": 2, "colour_intensity": 2, "density": 4,
}
CENSOR_LIMIT = {"malic_acid": 0.1, "lactic_acid": 0.1}  # lab reports "<0.1" below this


@dataclass(frozen=True)
class StyleRecipe:
    """How one planted style is drawn."""

    key: str
    label: str
    colour: str
    share: float
    base_grade: float
    extract: tuple[float, float]  # non-sugar extract, g/L (mean, sd), for density
    # analyte -> ("n", mean, sd) or ("ln", median, sdlog)
    chemistry: dict[str, tuple[str, float, float]]
    drivers: dict[str, float]  # analyte -> grade points per within-style SD
    malolactic: bool = False  # malolactic fermentation runs: lactic acid rises as malic falls


def _n(mean: float, sd: float) -> tuple[str, float, float]:
    return ("n", mean, sd)


def _ln(median: float, sdlog: float) -> tuple[str, float, float]:
    return ("ln", median, sdlog)


RECIPES: tuple[StyleRecipe, ...] = (
    StyleRecipe("crisp_white", "crisp dry white", "white", 1700 / 6000, 15.0, (22, 2), {
        "alcohol": _n(12.0, 0.5), "residual_sugar": _ln(2.5, 0.35),
        "titratable_acidity": _n(7.4, 0.6), "volatile_acidity": _n(0.30, 0.06),
        "ph": _n(3.15, 0.07), "free_so2": _n(32, 6), "total_so2": _n(120, 18),
        "malic_acid": _n(2.8, 0.5), "lactic_acid": _ln(0.15, 0.5), "potassium": _n(700, 90),
        "total_phenolics": _n(0.25, 0.05), "colour_intensity": _n(0.25, 0.06),
    }, {"titratable_acidity": 0.6, "malic_acid": 0.6, "volatile_acidity": -0.5, "ph": -0.45}),
    StyleRecipe("barrel_white", "barrel-aged white", "white", 1000 / 6000, 15.6, (26, 2), {
        "alcohol": _n(13.4, 0.5), "residual_sugar": _ln(2.0, 0.35),
        "titratable_acidity": _n(6.0, 0.5), "volatile_acidity": _n(0.45, 0.07),
        "ph": _n(3.40, 0.08), "free_so2": _n(28, 6), "total_so2": _n(110, 18),
        "malic_acid": _ln(0.2, 0.6), "lactic_acid": _n(1.6, 0.3), "potassium": _n(850, 100),
        "total_phenolics": _n(0.40, 0.07), "colour_intensity": _n(0.50, 0.10),
    }, {"lactic_acid": 0.5, "alcohol": 0.45, "volatile_acidity": -0.6}, malolactic=True),
    StyleRecipe("rose", "dry rosé", "rose", 900 / 6000, 14.6, (23, 2), {
        "alcohol": _n(12.5, 0.5), "residual_sugar": _ln(4.0, 0.35),
        "titratable_acidity": _n(6.5, 0.5), "volatile_acidity": _n(0.35, 0.06),
        "ph": _n(3.30, 0.07), "free_so2": _n(30, 6), "total_so2": _n(115, 18),
        "malic_acid": _n(1.8, 0.4), "lactic_acid": _ln(0.3, 0.4), "potassium": _n(780, 90),
        "total_phenolics": _n(0.60, 0.10), "colour_intensity": _n(1.20, 0.30),
    }, {"titratable_acidity": 0.5, "volatile_acidity": -0.5, "residual_sugar": -0.45}),
    StyleRecipe("light_red", "light red", "red", 1000 / 6000, 14.9, (28, 2.5), {
        "alcohol": _n(12.8, 0.5), "residual_sugar": _ln(1.8, 0.35),
        "titratable_acidity": _n(5.6, 0.4), "volatile_acidity": _n(0.50, 0.08),
        "ph": _n(3.50, 0.07), "free_so2": _n(24, 5), "total_so2": _n(80, 14),
        "malic_acid": _ln(0.25, 0.6), "lactic_acid": _n(1.5, 0.3), "potassium": _n(1100, 120),
        "total_phenolics": _n(1.8, 0.25), "colour_intensity": _n(6.0, 1.2),
    }, {"malic_acid": -0.6, "volatile_acidity": -0.6}, malolactic=True),
    StyleRecipe("structured_red", "structured red", "red", 1200 / 6000, 16.0, (31, 3), {
        "alcohol": _n(14.2, 0.5), "residual_sugar": _ln(2.2, 0.35),
        "titratable_acidity": _n(5.4, 0.4), "volatile_acidity": _n(0.58, 0.09),
        "ph": _n(3.65, 0.07), "free_so2": _n(26, 5), "total_so2": _n(95, 15),
        "malic_acid": _ln(0.2, 0.6), "lactic_acid": _n(1.8, 0.3), "potassium": _n(1350, 130),
        "total_phenolics": _n(3.2, 0.4), "colour_intensity": _n(13.0, 2.5),
    }, {"alcohol": 0.5, "ph": 0.5, "volatile_acidity": -0.6, "malic_acid": -0.45},
        malolactic=True),
    StyleRecipe("late_harvest", "late-harvest sweet", "white", 160 / 6000, 15.3, (30, 3), {
        "alcohol": _n(11.0, 0.7), "residual_sugar": _ln(110, 0.3),
        "titratable_acidity": _n(7.8, 0.7), "volatile_acidity": _n(0.80, 0.15),
        "ph": _n(3.55, 0.08), "free_so2": _n(45, 8), "total_so2": _n(220, 30),
        "malic_acid": _n(2.5, 0.5), "lactic_acid": _ln(0.3, 0.5), "potassium": _n(1000, 120),
        "total_phenolics": _n(0.45, 0.08), "colour_intensity": _n(0.90, 0.20),
    }, {"residual_sugar": 0.8, "volatile_acidity": -0.5}),
    StyleRecipe("sparkling_base", "sparkling base", "white", 40 / 6000, 14.0, (20, 2), {
        "alcohol": _n(10.5, 0.4), "residual_sugar": _ln(1.5, 0.3),
        "titratable_acidity": _n(9.5, 0.7), "volatile_acidity": _n(0.25, 0.05),
        "ph": _n(3.00, 0.06), "free_so2": _n(20, 4), "total_so2": _n(70, 12),
        "malic_acid": _n(3.5, 0.5), "lactic_acid": _ln(0.1, 0.4), "potassium": _n(550, 70),
        "total_phenolics": _n(0.20, 0.04), "colour_intensity": _n(0.15, 0.04),
    }, {"titratable_acidity": 0.6}),
)
RECIPES_BY_KEY = {r.key: r for r in RECIPES}
NO_EFFECT = ("free_so2", "total_so2", "potassium", "total_phenolics", "colour_intensity")
# Within-style links, on the scale of each analyte's standard score: analyte ->
# ((parent, loading), ...); the rest of its variance is its own. Correlations in the
# ranges seen in lab panels: fixed acidity vs pH about -0.68, free vs total SO2 about
# +0.67, density vs alcohol -0.50 (reds) to -0.78 (whites) in the Vinho Verde panels of
# Cortez et al. (2009), Decision Support Systems 47(4) (values from memory); pH rising
# with potassium (Boulton (1980), Am. J. Enol. Vitic. 31(2), from memory); colour with
# phenolics in reds, and lactic acid against malic acid through malolactic fermentation
# (1 g malic gives 0.672 g lactic), common practice.
LINKS: dict[str, tuple[tuple[str, float], ...]] = {
    "ph": (("titratable_acidity", -0.65), ("potassium", 0.45)),
    "total_so2": (("free_so2", 0.7),),
}
RED_LINKS: dict[str, tuple[tuple[str, float], ...]] = {
    "colour_intensity": (("total_phenolics", 0.7),),
}
MLF_LINKS: dict[str, tuple[tuple[str, float], ...]] = {
    "lactic_acid": (("malic_acid", -0.7),),
}
GRADE_NOISE = 0.8
VINTAGES = tuple(range(2019, 2026))


@dataclass(frozen=True)
class DemoRange:
    """Everything the generator makes: tables as text, ready to write."""

    lots: pd.DataFrame
    new_lots: pd.DataFrame
    truth_lots: pd.DataFrame
    truth_new_lots: pd.DataFrame
    truth_drivers: pd.DataFrame


# --------------------------------------------------------------------------- drawing


def _links(recipe: StyleRecipe) -> dict[str, tuple[tuple[str, float], ...]]:
    """The within-style links of one style's chemistry (density aside)."""
    links = dict(LINKS)
    if recipe.colour == "red":
        links.update(RED_LINKS)
    if recipe.malolactic:
        links.update(MLF_LINKS)
    return links


# standard normals one lot takes from the stream, in the order _draw takes them: the
# analytes' own parts (density aside), the non-sugar extract, the density noise
NORMALS_PER_LOT = len(ANALYTES) + 1


def _draw(rng: np.random.Generator, recipe: StyleRecipe, n: int) -> tuple[pd.DataFrame, np.ndarray]:
    """Chemistry of ``n`` lots of one style and each lot's planted grade effect.

    Each analyte's standard score is its parents' scores times their loadings
    plus its own part (scaled so the score keeps unit variance); the grade
    effect acts on the planted drivers' scores only.
    """
    own = rng.standard_normal((len(ANALYTES) - 1, n))
    extract = rng.standard_normal(n)
    noise = rng.standard_normal(n)
    return _chemistry(recipe, own, extract, noise)


def _chemistry(recipe: StyleRecipe, own: np.ndarray, extract_z: np.ndarray,
               density_z: np.ndarray) -> tuple[pd.DataFrame, np.ndarray]:
    """The chemistry and grade effect of lots of one style from their standard normals.

    Parameters
    ----------
    recipe : StyleRecipe
    own : ndarray, shape (analytes - 1, n)
        Each analyte's own part (density aside).
    extract_z, density_z : ndarray, shape (n,)
        The normals of the non-sugar extract and of the density noise.

    Returns
    -------
    (DataFrame, ndarray)
        The lots' chemistry and their planted grade effects.
    """
    n = own.shape[1]
    z = {a: own[i] for i, a in enumerate(ANALYTES[:-1])}
    for analyte, parents in _links(recipe).items():
        rest = np.sqrt(max(1.0 - sum(w * w for _, w in parents), 0.0))
        z[analyte] = sum(w * z[p] for p, w in parents) + rest * z[analyte]
    data: dict[str, np.ndarray] = {}
    effect = np.zeros(n)
    for analyte in ANALYTES[:-1]:
        family, centre, spread = recipe.chemistry[analyte]
        data[analyte] = (centre * np.exp(spread * z[analyte]) if family == "ln"
                         else centre + spread * z[analyte])
        effect += recipe.drivers.get(analyte, 0.0) * z[analyte]
    data = {a: np.maximum(v, 0.01) for a, v in data.items()}
    data["ph"] = np.clip(data["ph"], 2.8, 4.2)
    data["free_so2"] = np.minimum(data["free_so2"], 0.6 * data["total_so2"])
    extract = recipe.extract[0] + recipe.extract[1] * extract_z
    # ethanol-water density near 20 degC falls about 0.00118 g/mL per % vol over 10-15 % vol;
    # dissolved solids add about 0.000385 g/mL per g/L (common practice, approximate)
    data["density"] = (0.99820 - 0.00118 * data["alcohol"]
                       + 0.000385 * (data["residual_sugar"] + extract)
                       + 0.0002 * density_z)
    return pd.DataFrame(data, columns=list(ANALYTES)), effect


def _draw_each(rng: np.random.Generator, recipes: list[StyleRecipe],
               picks: np.ndarray) -> pd.DataFrame:
    """Chemistry of one lot per pick, as ``_draw(rng, recipes[pick], 1)`` lot after lot.

    One lot at a time takes its normals from the stream in turn, so the normals of
    all lots drawn at once in lot order are the same numbers; drawing them in one
    block and computing each style's lots together keeps every value and the
    stream after it, at array speed.
    """
    normals = rng.standard_normal((len(picks), NORMALS_PER_LOT))
    chem = pd.DataFrame(np.empty((len(picks), len(ANALYTES))), columns=list(ANALYTES))
    for idx in np.unique(picks):
        rows = np.flatnonzero(picks == idx)
        part = normals[rows]
        drawn, _ = _chemistry(recipes[idx], part[:, :-2].T, part[:, -2], part[:, -1])
        chem.iloc[rows] = drawn.to_numpy()
    return chem


def _grade(rng: np.random.Generator, base: float, effect: np.ndarray) -> np.ndarray:
    grade = base + effect + GRADE_NOISE * rng.standard_normal(len(effect))
    return np.round(np.clip(grade, 6.0, 20.0), 1)


def _random_chemistry(rng: np.random.Generator, reference: pd.DataFrame, n: int) -> pd.DataFrame:
    """Lots that fit no style: each analyte drawn independently over the range."""
    out = {}
    for analyte in ANALYTES:
        values = reference[analyte].to_numpy()
        lo, hi = np.quantile(values, [0.01, 0.99])
        if analyte in ("residual_sugar", "colour_intensity", "total_phenolics"):
            out[analyte] = np.exp(rng.uniform(np.log(lo), np.log(hi), n))
        else:
            out[analyte] = rng.uniform(lo, hi, n)
    frame = pd.DataFrame(out)
    frame["free_so2"] = np.minimum(frame["free_so2"], 0.6 * frame["total_so2"])
    return frame


def _counts(n_lots: int, recipes: list[StyleRecipe]) -> list[int]:
    shares = np.array([r.share for r in recipes])
    shares = shares / shares.sum()
    counts = np.floor(shares * n_lots).astype(int)
    counts[0] += n_lots - counts.sum()
    return counts.tolist()


def _colours(rng: np.random.Generator, truth_style: np.ndarray) -> np.ndarray:
    """Each lot's colour: its style's, or a random one for a lot of random chemistry.

    The random colours are drawn one lot at a time in lot order, as they always were,
    so that the stream and every later draw stay the same for a seed.
    """
    colour = pd.Series(truth_style).map({k: r.colour for k, r in RECIPES_BY_KEY.items()})
    out = colour.to_numpy(dtype=object)
    for k in np.flatnonzero(colour.isna().to_numpy()):
        out[k] = rng.choice(["red", "white", "rose"])
    return out


def _as_text(frame: pd.DataFrame, blank: np.ndarray | None = None) -> pd.DataFrame:
    """Round like a lab report, write censored values as '<limit'."""
    out = pd.DataFrame(index=frame.index)
    for analyte in ANALYTES:
        digits = DECIMALS[analyte]
        values = frame[analyte].to_numpy()
        # Python floats format as NumPy's do, and map over a list is the fast path
        text = np.array(list(map(f"{{:.{digits}f}}".format, values.tolist())), dtype=object)
        limit = CENSOR_LIMIT.get(analyte)
        if limit is not None:
            text[values < limit] = f"<{limit:g}"
        if blank is not None:
            text[blank[:, ANALYTES.index(analyte)]] = ""
        out[analyte] = text
    return out


# --------------------------------------------------------------------------- the range


def generate_demo(n_lots: int = 6000, seed: int = 7, noise_share: float = 0.0,
                  blank_share: float = 0.004, bad_rows: int = 12, n_new: int = 50,
                  styles: tuple[str, ...] | None = None) -> DemoRange:
    """Generate the demo range.

    Parameters
    ----------
    n_lots : int
        Lots drawn from the styles (before lots of random chemistry and faulty rows).
    seed : int
        Seed of the generator; the same arguments give the same range.
    noise_share : float
        Share of extra lots, relative to ``n_lots``, with random chemistry that
        fits no style (true style ``none``).
    blank_share : float
        Share of analyte cells left blank (to be imputed).
    bad_rows : int
        Faulty rows appended, one of each rejection reason in turn.
    n_new : int
        New lots to place; six of them are planted atypical or beyond a limit.
    styles : tuple of str, optional
        Keys of :data:`RECIPES` to draw from (all when None).

    Returns
    -------
    DemoRange
    """
    rng = np.random.default_rng(seed)
    recipes = [RECIPES_BY_KEY[k] for k in styles] if styles else list(RECIPES)
    parts, grades, truth = [], [], []
    for recipe, count in zip(recipes, _counts(n_lots, recipes)):
        chem, effect = _draw(rng, recipe, count)
        parts.append(chem)
        grades.append(_grade(rng, recipe.base_grade, effect))
        truth.extend([recipe.key] * count)
    chem = pd.concat(parts, ignore_index=True)
    grade = np.concatenate(grades)
    n_noise = int(round(noise_share * n_lots))
    if n_noise:
        chem = pd.concat([chem, _random_chemistry(rng, chem, n_noise)], ignore_index=True)
        grade = np.concatenate([grade, _grade(rng, 14.8, np.zeros(n_noise))])
        truth.extend(["none"] * n_noise)
    n = len(chem)
    order = rng.permutation(n)
    chem, grade = chem.iloc[order].reset_index(drop=True), grade[order]
    truth_style = np.asarray(truth, dtype=object)[order]
    vintage = rng.choice(VINTAGES, size=n)
    colour = _colours(rng, truth_style)
    lot_ids = [f"QV{v % 100:02d}-{i + 1:05d}" for i, v in enumerate(vintage)]
    blank = rng.random((n, len(ANALYTES))) < blank_share
    text = _as_text(chem, blank)
    lots = pd.concat([
        pd.DataFrame({"lot": lot_ids, "vintage": vintage.astype(str), "colour": colour,
                      "grade": [f"{g:.1f}" for g in grade]}),
        text,
    ], axis=1)
    lots = _append_bad_rows(lots, rng, bad_rows)
    truth_lots = pd.DataFrame({"lot": lot_ids, "style": truth_style})
    new_lots, truth_new = _new_lots(rng, recipes, chem, n_new)
    return DemoRange(lots=lots, new_lots=new_lots, truth_lots=truth_lots,
                     truth_new_lots=truth_new, truth_drivers=_truth_drivers(recipes))


def _parents(recipe: StyleRecipe) -> dict[str, tuple[str, ...]]:
    """Analyte -> the analytes it is linked with in ``recipe`` (both ways)."""
    out: dict[str, list[str]] = {a: [] for a in ANALYTES}
    links = {**_links(recipe), "density": (("alcohol", -1.0), ("residual_sugar", 1.0))}
    for child, parents in links.items():
        for parent, _ in parents:
            out[child].append(parent)
            out[parent].append(child)
    return {a: tuple(v) for a, v in out.items()}


def _truth_drivers(recipes: list[StyleRecipe]) -> pd.DataFrame:
    """Per style and analyte: ``direct`` (a planted driver), ``indirect`` (linked to a
    planted driver, no effect of its own; ``rides_on`` names the driver) or ``no_effect``."""
    rows = []
    for recipe in recipes:
        linked = _parents(recipe)
        for analyte in ANALYTES:
            beta = recipe.drivers.get(analyte, 0.0)
            rides = [p for p in linked[analyte] if recipe.drivers.get(p, 0.0)]
            if beta:
                role, rides_on = "direct", ""
            elif rides:
                # the driver with the largest planted effect carries the passenger most
                role = "indirect"
                rides_on = max(rides, key=lambda p: abs(recipe.drivers[p]))
            else:
                role, rides_on = "no_effect", ""
            rows.append({"style": recipe.key, "analyte": analyte, "role": role,
                         "sign": int(np.sign(beta)), "effect_per_sd": beta,
                         "rides_on": rides_on})
    return pd.DataFrame(rows)


_FAULTS = ("missing_lot_id", "duplicate_lot_id", "non_numeric", "negative", "out_of_range",
           "free_so2_above_total", "missing_grade", "too_many_missing")


def _append_bad_rows(lots: pd.DataFrame, rng: np.random.Generator, count: int) -> pd.DataFrame:
    """Faulty rows as real lab exports have them, one rejection reason after another."""
    rows = []
    for k in range(count):
        source = lots.iloc[int(rng.integers(0, len(lots)))].copy()
        fault = _FAULTS[k % len(_FAULTS)]
        source["lot"] = f"QV{int(source['vintage']) % 100:02d}-9{k + 1:04d}"
        if fault == "missing_lot_id":
            source["lot"] = ""
        elif fault == "duplicate_lot_id":
            source["lot"] = lots["lot"].iloc[int(rng.integers(0, len(lots)))]
        elif fault == "non_numeric":
            source["ph"] = "see note"
        elif fault == "negative":
            source["total_so2"] = "-12"
        elif fault == "out_of_range":
            source["ph"] = "5.20"
        elif fault == "free_so2_above_total":
            source["free_so2"], source["total_so2"] = "95", "60"
        elif fault == "missing_grade":
            source["grade"] = ""
        else:
            for analyte in ANALYTES[:6]:
                source[analyte] = ""
        rows.append(source)
    if not rows:
        return lots
    return pd.concat([lots, pd.DataFrame(rows)], ignore_index=True)


def _new_lots(rng: np.random.Generator, recipes: list[StyleRecipe], reference: pd.DataFrame,
              n_new: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """New lots of the coming vintage; the last six are planted unusual ones."""
    n_typical = max(n_new - 6, 0)
    weights = np.array([max(r.share, 0.02) for r in recipes])
    picks = rng.choice(len(recipes), size=n_typical, p=weights / weights.sum())
    frames = [_draw_each(rng, recipes, picks)] if n_typical else []
    truth = [recipes[idx].key for idx in picks]
    anomaly = [""] * n_typical
    planted = _planted_anomalies(rng, recipes, reference)
    for style, note, chem in planted[: max(n_new - n_typical, 0)]:
        frames.append(chem)
        truth.append(style)
        anomaly.append(note)
    chem = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=ANALYTES)
    ids = [f"QV26-N{i + 1:03d}" for i in range(len(chem))]
    colour = [RECIPES_BY_KEY[t].colour if t in RECIPES_BY_KEY else "red" for t in truth]
    new = pd.concat([pd.DataFrame({"lot": ids, "vintage": "2026", "colour": colour}),
                     _as_text(chem)], axis=1)
    return new, pd.DataFrame({"lot": ids, "style": truth, "planted": anomaly})


def _planted_anomalies(rng: np.random.Generator, recipes: list[StyleRecipe],
                       reference: pd.DataFrame) -> list[tuple[str, str, pd.DataFrame]]:
    keys = [r.key for r in recipes]

    def typical(key: str) -> pd.DataFrame:
        recipe = RECIPES_BY_KEY[key if key in keys else keys[0]]
        chem, _ = _draw(rng, recipe, 1)
        return chem

    red = "structured_red" if "structured_red" in keys else keys[0]
    white = "crisp_white" if "crisp_white" in keys else keys[0]
    rose = "rose" if "rose" in keys else keys[0]
    out = []
    chem = typical(red)
    chem.loc[0, "volatile_acidity"] = 1.45
    out.append((red, "volatile acidity 1.45 g/L, above the EU and OIV red maximum", chem))
    chem = typical(white)
    chem.loc[0, ["total_so2", "free_so2"]] = [245.0, 40.0]
    out.append((white, "total SO2 245 mg/L in a dry white, above the EU maximum", chem))
    out.append(("none", "random chemistry, fits no style", _random_chemistry(rng, reference, 1)))
    chem = typical(white)
    chem.loc[0, ["colour_intensity", "total_phenolics"]] = [9.0, 2.6]
    out.append(("none", "white chemistry with red colour and phenolics", chem))
    chem = typical(white)
    chem.loc[0, "ph"] = 3.95
    out.append((white, "pH 3.95, far above its style", chem))
    chem = typical(rose)
    chem.loc[0, "free_so2"] = 4.0
    out.append((rose, "free SO2 4 mg/L: low molecular SO2", chem))
    return out


def planted_profiles(demo: DemoRange, config: Config, trust_all: bool = False) -> pd.DataFrame:
    """The drivers table of a demo range profiled under its planted styles, with the truth.

    The segmentation is left out, so that planted-truth checks of the profiles
    measure the profiles alone: every used lot keeps the style it was drawn from.

    Parameters
    ----------
    demo : DemoRange
    config : Config
        The run's config (``configs/demo.toml`` fits the demo range).
    trust_all : bool
        Trust every planted style; otherwise a style is trusted when it holds at least
        ``segment.min_style_lots`` lots, as the engine would judge its size.

    Returns
    -------
    DataFrame
        The within-style rows of ``drivers.csv`` merged with ``truth_drivers.csv``
        (its ``role`` renamed ``planted``).
    """
    from vinstrata.profile.drivers import profile_table
    from vinstrata.profile.groups import POOLED
    from vinstrata.read.ingest import RawTable, Source
    from vinstrata.read.validate import validate

    raw = RawTable(cells=demo.lots.astype(str), rows=list(range(2, len(demo.lots) + 2)),
                   source=Source("demo", "demo", "", "text"))
    table = validate(raw, config)
    used = table.used
    truth = demo.truth_lots.set_index("lot")["style"].reindex(
        table.ids.loc[used, "lot_id"]).to_numpy()
    lots = pd.DataFrame({"grade": table.ids.loc[used, "grade"].to_numpy(), "style": truth,
                         "nearest_style": truth})
    styles = pd.DataFrame({"style": sorted(set(truth))})
    counts = pd.Series(truth).value_counts()
    styles["trusted"] = True if trust_all else (
        styles["style"].map(counts) >= config.segment.min_style_lots)
    profiles = profile_table(table.values[used].reset_index(drop=True),
                             table.flags[used].reset_index(drop=True), lots, styles,
                             table.specs, config)
    rows = profiles.drivers[profiles.drivers["style"] != POOLED]
    return rows.merge(demo.truth_drivers.rename(columns={"role": "planted"}),
                      on=["style", "analyte"])


def write_demo(out_dir: str | Path, demo: DemoRange) -> dict[str, Path]:
    """Write the demo tables as CSV (UTF-8, comma, LF) and return their paths."""
    from vinstrata.folders import atomic_path

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = {
        "lots": ("lots.csv", demo.lots), "new_lots": ("new_lots.csv", demo.new_lots),
        "truth_lots": ("truth_lots.csv", demo.truth_lots),
        "truth_new_lots": ("truth_new_lots.csv", demo.truth_new_lots),
        "truth_drivers": ("truth_drivers.csv", demo.truth_drivers),
    }
    paths = {}
    for key, (name, frame) in files.items():
        path = out / name
        with atomic_path(path) as temp:  # whole or not at all, like every output
            frame.to_csv(temp, index=False, lineterminator="\n")
        paths[key] = path
    return paths

"""The pages of the buyer briefing, one function per page, each returning a Figure.

Every page function takes a :class:`Briefing` (plain data gathered once) and a
page number. Scatter layers are rasterised so that the PDF stays small with
many lots; text stays vector.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from vinstrata.config import Bands, Config
from vinstrata.place.limits import CAUTION, VA_EXCEPTIONS
from vinstrata.place.placing import INDICATION, Placements
from vinstrata.profile.bands import lot_bands
from vinstrata.profile.drivers import POOLED, ROLE_ORDER, Profiles, driver_summary
from vinstrata.read.cells import CENSORED_ABOVE, CENSORED_BELOW, MISSING
from vinstrata.read.lots import UNASSIGNED, USED, observed
from vinstrata.read.quality import reason_counts
from vinstrata.report.layout import (
    INK,
    LINE_ADVANCE,
    LINESPACING,
    MARGIN,
    MUTED,
    PAGE,
    UNASSIGNED_COLOUR,
    WARN_COLOUR,
    band_colours,
    footer,
    heading,
    mono_block,
    new_page,
    style_colour,
    text_block,
    tidy,
    wrap,
)
from vinstrata.segment.model import StyleModel
from vinstrata.segment.previous import KEPT, NEW, Comparison
from vinstrata.settings import PlaceSettings, ProfileSettings

MAX_TABLE_ROWS = 48
MAX_LABELLED = 60
LABEL_ALL = 20
# Lots drawn on a map at most. Beyond a few tens of thousands a map shows no more (the dots
# merge, and the colour drawn last covers the rest), while drawing and rasterising grow
# with every lot; above it the maps show a seeded sample, stratified by style.
MAP_POINTS = 25_000
MIN_STYLE_DOTS = 1_000  # dots a style (or the lots fitting none) keeps at least in a sample
MAX_VECTOR_DOTS = 2_000  # new lots drawn as vector markers at most; more are rasterised


@dataclass(frozen=True)
class Briefing:
    """Everything the pages draw, gathered once.

    ``config`` gives the briefing's own settings (``[report]``); every number
    a page states about a result comes from that result: the model's config
    and parameters, the profiles' and the placements' settings.
    """

    model: StyleModel
    config: Config
    profiles: Profiles | None
    placements: Placements | None
    date: str
    title: str
    foot: str = ""
    style_index: dict[str, int] = field(default_factory=dict)
    # what changed since the previous model (segment --previous); None without one
    comparison: Comparison | None = None
    # lots drawn on a map at most (a seeded sample, stratified by style, beyond it)
    map_points: int = MAP_POINTS

    @cached_property
    def map_sample(self) -> MapSample:
        """The training lots the maps draw: all of them, or a seeded stratified sample."""
        style = self.model.lots["style"].to_numpy(dtype=object)
        return map_sample(style, self.map_points, self.model.params.seed)

    @cached_property
    def lot_bands(self) -> tuple[np.ndarray, np.ndarray]:
        """Home style and band of every training lot (computed once for every page)."""
        return _bands(self)

    @property
    def styles(self) -> pd.DataFrame:
        return self.model.styles

    def colour(self, style: str) -> str:
        if style not in self.style_index:
            return UNASSIGNED_COLOUR
        return style_colour(self.style_index[style])

    def label(self, analyte: str) -> str:
        spec = self.model.spec(analyte)
        return spec.label

    def axis_label(self, analyte: str) -> str:
        spec = self.model.spec(analyte)
        return f"{spec.label} ({spec.unit})" if spec.unit else spec.label

    @property
    def profile_settings(self) -> ProfileSettings:
        """The profiles' settings; without profiles, those the model's config gives."""
        if self.profiles is not None:
            return self.profiles.settings
        return ProfileSettings.from_config(self.model.config, self.model.source.sha256)

    @property
    def place_settings(self) -> PlaceSettings:
        """The placements' settings; without placements, those the model's config gives."""
        if self.placements is not None:
            return self.placements.settings
        return PlaceSettings.from_config(self.model.config, self.model.source.sha256)

    @property
    def bands(self) -> Bands:
        """The grade bands of the profiles (of the model's config without profiles)."""
        return self.profile_settings.bands


@dataclass(frozen=True)
class MapSample:
    """The lots a map draws and what to say about them.

    ``index`` holds the drawn lots' positions in file order; ``floor`` the dots
    each style keeps at least in a sample (0 when every lot is drawn).
    """

    index: np.ndarray
    n_lots: int
    floor: int = 0

    @property
    def sampled(self) -> bool:
        return len(self.index) < self.n_lots

    def note(self, what: str = "lots") -> str:
        """The sample in plain words ("" when every lot is drawn)."""
        if not self.sampled:
            return ""
        return f"a seeded sample of {len(self.index):,} of {self.n_lots:,} {what}"


def _quotas(sizes: np.ndarray, cap: int, floor: int) -> np.ndarray:
    """Dots per stratum: ``floor`` each (or all its lots), the rest of ``cap`` shared
    in proportion to the lots left, by largest remainders (ties to the first stratum)."""
    base = np.minimum(sizes, floor)
    left = sizes - base
    spare = cap - int(base.sum())
    if spare <= 0 or not left.sum():
        return base
    share = spare * left / left.sum()
    extra = np.floor(share).astype(int)
    rest = spare - int(extra.sum())
    order = np.argsort(-(share - extra), kind="stable")[:rest]
    extra[order] += 1
    return base + np.minimum(extra, left)


def map_sample(strata: np.ndarray, cap: int, seed: int) -> MapSample:
    """The lots a map draws: every lot up to ``cap``, above it a seeded stratified sample.

    Each stratum (a style, or the lots fitting none) keeps at least
    ``min(MIN_STYLE_DOTS, cap // (2 * strata))`` dots, or all its lots, so that small
    styles and unassigned lots stay visible; the rest of ``cap`` goes to the strata in
    proportion to their lots. Strata are visited in sorted order and each drawn from one
    generator seeded with ``seed``, so the same lots give the same sample.

    Parameters
    ----------
    strata : ndarray
        Each lot's stratum (its style).
    cap : int
        Lots drawn at most.
    seed : int
        The model's seed.

    Returns
    -------
    MapSample
    """
    n = len(strata)
    if n <= cap:
        return MapSample(np.arange(n), n)
    codes, keys = pd.factorize(pd.Series(strata, dtype=object), sort=True)
    sizes = np.bincount(codes, minlength=len(keys))
    floor = max(min(MIN_STYLE_DOTS, cap // (2 * len(keys))), 1)
    quotas = _quotas(sizes, cap, floor)
    rng = np.random.default_rng(seed)
    members = np.argsort(codes, kind="stable")  # lots grouped by stratum, file order inside
    starts = np.concatenate([[0], np.cumsum(sizes)])
    picked = [rng.choice(members[starts[k]:starts[k + 1]], size=int(quotas[k]), replace=False)
              for k in range(len(keys))]
    return MapSample(np.sort(np.concatenate(picked)), n, floor)


def _bands(data: Briefing) -> tuple[np.ndarray, np.ndarray]:
    """Home style and band of every training lot, as the profiles see them."""
    lots = data.model.lots
    settings = data.profile_settings
    return lot_bands(lots["grade"].to_numpy(dtype=float), lots["style"].to_numpy(dtype=object),
                     lots["nearest_style"].to_numpy(dtype=object), settings.bands,
                     settings.include_unassigned)


def _finish(fig: Figure, data: Briefing, page: int) -> Figure:
    footer(fig, data.foot, page)
    return fig


def _untrusted(data: Briefing) -> pd.DataFrame:
    return data.styles[~data.styles["trusted"].astype(bool)]


# --------------------------------------------------------------------------- cover


def cover(data: Briefing, page: int) -> Figure:
    model, config = data.model, data.config
    fig = new_page(data.title, config.report.producer)
    rows = model.rows
    n_rows, n_used = len(rows), int((rows["status"] == USED).sum())
    unassigned = int((model.lots["style"] == UNASSIGNED).sum())
    trusted = int(data.styles["trusted"].sum())
    y = heading(fig, 0.895, "The range")
    facts = [
        f"File {model.source.name}: {n_rows} rows read, {n_used} lots used, "
        f"{n_rows - n_used} rejected (see the data-quality page).",
        f"{len(data.styles)} styles found from the chemistry alone ({trusted} trusted, "
        f"{len(data.styles) - trusted} untrusted); {unassigned} lots fit no style.",
        f"Briefing of {data.date}.",
    ]
    y, _ = text_block(fig, y, facts, size=9.5)
    y = heading(fig, y - 0.01, "Styles")
    lines = [f"{r.style}  {r.style_name}  —  {r.n_lots} lots ({100 * r.share:.0f} %)"
             + ("" if r.trusted else "  —  UNTRUSTED") for r in data.styles.itertuples()]
    y, _ = text_block(fig, y, lines, size=9, gap=0.1)
    y = heading(fig, y - 0.01, "Key findings")
    if data.profiles is None:
        findings = ["No grades were given, so no quality drivers were profiled."]
    else:
        findings = driver_summary(data.profiles, model, config.report.top_drivers)
        notable = data.profiles.contrasts[data.profiles.contrasts["kind"].isin(
            ["reversal", "pooled_misleading"])]
        # one sentence per analyte: a reversal already says what the pooled range shows
        notable = notable.assign(_first=notable["kind"].map({"reversal": 0}).fillna(1))
        notable = notable.sort_values("_first", kind="stable").drop_duplicates("analyte")
        findings += list(notable.sort_index()["sentence"])
    y, written = text_block(fig, y, findings, size=8.5, bullet="• ", bottom=0.19)
    if written < len(findings):
        y, _ = text_block(fig, y, [f"... {len(findings) - written} more findings on the "
                                   "'where styles differ' page and in contrasts.csv."], size=8,
                          bottom=0.1)
    warn = _untrusted(data)
    if len(warn):
        y = heading(fig, max(y, 0.16) - 0.005, "Too small to trust", size=10)
        text_block(fig, y, [f"{r.style}: {r.trust_note}" for r in warn.itertuples()], size=8.5,
                   bottom=0.08, bullet="• ")
    text_block(fig, 0.07, ["Styles are found from chemistry alone; effects describe these "
                           "lots, not causes. " + CAUTION], size=7.5, bottom=0.03)
    return _finish(fig, data, page)


# --------------------------------------------------------------------------- maps


def _map_axes(fig: Figure, rect: list[float]):
    ax = fig.add_axes(rect)
    tidy(ax)
    ax.set_xlabel("UMAP 1 (arbitrary units)", fontsize=7)
    ax.set_ylabel("UMAP 2 (arbitrary units)", fontsize=7)
    return ax


def maps(data: Briefing, page: int) -> Figure:
    sample = data.map_sample
    subtitle = ("Each dot is a lot; nearby lots have similar chemistry. Grey: lots that fit no "
                "style.")
    if sample.sampled:
        subtitle += f" Maps drawn from {sample.note()}."
    fig = new_page("The range on one map", subtitle)
    size = float(np.clip(10000 / max(len(sample.index), 1), 0.4, 14))
    _style_map(fig, data, size)
    _band_map(fig, data, size)
    if sample.sampled:
        text_block(fig, 0.27, [
            f"Both maps are drawn from {sample.note()}: every style, and the lots that fit no "
            f"style, keep at least {sample.floor:,} dots (or all their lots), so small ones stay "
            "visible. The counts in the legends are of all lots."], size=7, width=34,
            left=0.75, bottom=0.07)
    return _finish(fig, data, page)


def _style_map(fig: Figure, data: Briefing, size: float) -> None:
    """The upper map: lots coloured by style, with a legend of the styles."""
    lots = data.model.lots
    x_all, y_all = lots["map_x"].to_numpy(), lots["map_y"].to_numpy()
    style_all = lots["style"].to_numpy(dtype=object)
    drawn = data.map_sample.index
    x, y, style = x_all[drawn], y_all[drawn], style_all[drawn]
    ax = _map_axes(fig, [0.1, 0.51, 0.62, 0.37])
    ax.set_title("coloured by style", fontsize=9, loc="left")
    un = style == UNASSIGNED
    for sid in data.model.style_ids:
        mask = style == sid
        ax.scatter(x[mask], y[mask], s=size, c=data.colour(sid), linewidths=0, rasterized=True)
        # the label sits at the median of all the style's lots, sampled or not
        every = style_all == sid
        if every.any():
            ax.text(np.median(x_all[every]), np.median(y_all[every]), sid, fontsize=8,
                    fontweight="bold", ha="center", va="center", color=INK,
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": data.colour(sid),
                          "alpha": 0.7})
    # unassigned lots on top, small and grey, so that the few there are stay visible
    ax.scatter(x[un], y[un], s=max(size, 3.0), c="#777777", marker="x", linewidths=0.5,
               rasterized=True)
    legend_y = 0.88
    for r in data.styles.itertuples():
        fig.text(0.75, legend_y, "●", color=data.colour(r.style), fontsize=10, va="top")
        text_block(fig, legend_y, [f"{r.style} {r.style_name} ({r.n_lots})"], size=7,
                   width=30, left=0.775, gap=0.1)
        legend_y -= 0.045


def _band_map(fig: Figure, data: Briefing, size: float) -> None:
    """The lower map: lots coloured by grade band, as the profiles band them."""
    lots = data.model.lots
    drawn = data.map_sample.index
    x, y = lots["map_x"].to_numpy()[drawn], lots["map_y"].to_numpy()[drawn]
    ax = _map_axes(fig, [0.1, 0.07, 0.62, 0.37])
    ax.set_title("coloured by grade band", fontsize=9, loc="left")
    if not np.isfinite(lots["grade"].to_numpy(dtype=float)).any():
        ax.scatter(x, y, s=size, c=UNASSIGNED_COLOUR, linewidths=0, rasterized=True)
        ax.text(0.5, 0.5, "no grades in this range", transform=ax.transAxes, ha="center",
                fontsize=10, color=MUTED)
        return
    settings = data.bands
    labels = settings.labels
    bands_all = data.lot_bands[1]
    bands = bands_all[drawn]
    colours = band_colours(len(labels))
    ax.scatter(x[bands < 0], y[bands < 0], s=size * 0.7, c=UNASSIGNED_COLOUR,
               linewidths=0, rasterized=True)
    counts = np.bincount(bands_all[bands_all >= 0], minlength=len(labels))
    for b in range(len(labels)):
        mask = bands == b
        ax.scatter(x[mask], y[mask], s=size, c=colours[b], linewidths=0, rasterized=True,
                   label=f"{labels[b]} ({int(counts[b])})")
    ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.02, 1),
              markerscale=max(1.0, 6 / max(size, 0.1)))
    mode = ("global cuts " + ", ".join(f"{c:g}" for c in settings.cuts)
            if settings.mode == "global" else
            "per-style quantiles " + ", ".join(f"{q:g}" for q in settings.quantiles))
    fig.text(0.75, 0.3, f"Bands: {mode}.", fontsize=7, color=MUTED, wrap=True)


# --------------------------------------------------------------------------- segmentation choice


def segmentation(data: Briefing, page: int) -> Figure:
    fig = new_page("How the styles were chosen",
                   "HDBSCAN cluster size picked by relative validity; clusters without a "
                   "chemical valley between them joined.")
    _sweep_plot(fig, data.model.sweep)
    y, _ = text_block(fig, 0.47, _segmentation_text(data.model), size=9)
    mono_block(fig, y - 0.02, _sweep_rows(data.model.sweep), size=8, left=MARGIN + 0.05,
               bold_first=True)
    return _finish(fig, data, page)


def _sweep_plot(fig: Figure, sweep: pd.DataFrame) -> None:
    """Relative validity and the unassigned share of each candidate cluster size."""
    ax = fig.add_axes([0.12, 0.56, 0.74, 0.3])
    tidy(ax)
    sizes = sweep["min_cluster_size"].to_numpy()
    validity = sweep["relative_validity"].to_numpy(dtype=float)
    ax.plot(sizes, validity, "-o", color="#0072B2", markersize=4, label="relative validity")
    chosen = sweep["chosen"].astype(bool).to_numpy()
    ax.plot(sizes[chosen], validity[chosen], "o", markersize=11, markerfacecolor="none",
            markeredgecolor=WARN_COLOUR, label="chosen")
    for s, v, k in zip(sizes, validity, sweep["n_styles"]):
        if np.isfinite(v):
            ax.annotate(f"{k} styles", (s, v), textcoords="offset points", xytext=(0, 6),
                        fontsize=6, ha="center", color=MUTED)
    if len(sizes) > 1:
        ax.set_xscale("log")
        ax.set_xticks(sizes, [str(v) for v in sizes])
        ax.minorticks_off()
    ax.set_xlabel("HDBSCAN min_cluster_size (lots)", fontsize=8)
    ax.set_ylabel("relative validity (DBCV approximation, no unit)", fontsize=8)
    twin = ax.twinx()
    twin.plot(sizes, 100 * sweep["unassigned_share"].to_numpy(dtype=float), "--s",
              color="#E69F00", markersize=3, label="unassigned")
    twin.set_ylabel("lots left unassigned by HDBSCAN (%)", fontsize=8)
    twin.tick_params(labelsize=7)
    handles = ax.get_legend_handles_labels()[0] + twin.get_legend_handles_labels()[0]
    ax.legend(handles, ["relative validity", "chosen", "unassigned (%)"], fontsize=7,
              frameon=False, loc="lower left")


def _segmentation_text(model: StyleModel) -> list[str]:
    """How the styles were chosen, with the model's own parameters."""
    params = model.params
    choice = "swept" if params.size_choice == "sweep" else "fixed in the config"
    space = (f"UMAP, {params.components} components" if params.space == "umap"
             else "the scaled chemistry itself")
    text = [
        f"Clustering space: {space}; {params.neighbours} neighbours, {params.epochs} epochs, "
        f"seed {params.seed}.",
        f"min_cluster_size {params.min_cluster_size} ({choice}), min_samples "
        f"{params.min_samples}: HDBSCAN found {params.n_clusters} clusters, which became "
        f"{len(model.style_ids)} styles after joining clusters with no valley between them in "
        f"the chemistry (threshold {params.merge_valley:g}).",
        "The pick: the highest relative validity of the joined clusters; candidates within 0.02 "
        "of the best count as ties and go to fewer unassigned lots, then to the larger size.",
        "Lots that fit no style are judged in the scaled chemistry (robust Mahalanobis distance "
        f"to the style, as a z score; above {model.outliers['cutoff']:g}: unassigned), because "
        "UMAP pulls unusual lots into the nearest cluster.",
    ]
    fitted = int(model.in_fit.sum())
    if fitted < len(model.lots):
        text.insert(0, (
            f"Styles fitted on a seeded sample of {fitted:,} of {len(model.lots):,} lots, "
            "stratified by chemistry so that small styles keep their lots; every other lot "
            "was then assigned the way a new lot is placed (style, membership, typicality) and "
            "counts in the styles and profiles like any other."))
    if params.one_style:
        text.append("No candidate kept two styles apart: the range is reported as one style.")
    return text


def _sweep_rows(sweep: pd.DataFrame) -> list[str]:
    """The sweep as fixed-width rows, the chosen candidate marked."""
    rows = [f"{'size':>6} {'samples':>8} {'clusters':>9} {'styles':>7} {'unassigned':>11} "
            f"{'validity':>9}"]
    for r in sweep.itertuples():
        mark = "  <- chosen" if r.chosen else ""
        v = f"{r.relative_validity:.3f}" if np.isfinite(r.relative_validity) else "-"
        rows.append(f"{r.min_cluster_size:>6} {r.min_samples:>8} {r.n_clusters:>9} "
                    f"{r.n_styles:>7} {100 * r.unassigned_share:>10.1f}% {v:>9}{mark}")
    return rows


# --------------------------------------------------------------------------- style cards


def style_card(data: Briefing, sid: str, page: int) -> Figure:
    row = data.styles.set_index("style").loc[sid]
    fig = new_page(f"{sid} · {row['style_name']}",
                   f"{int(row['n_lots'])} lots, {100 * row['share']:.1f} % of the range"
                   + (" · trusted" if row["trusted"] else ""))
    fig.add_artist(Rectangle((MARGIN - 0.022, 0.935), 0.012, 0.032, transform=fig.transFigure,
                             color=data.colour(sid)))
    top = 0.895
    if not row["trusted"]:
        fig.text(MARGIN, top, "UNTRUSTED STYLE", fontsize=16, fontweight="bold",
                 color=WARN_COLOUR, va="top")
        text_block(fig, top - 0.03, [f"Why: {row['trust_note']}. Its numbers are shown for "
                                     "completeness and should not guide decisions."],
                   size=10.5, width=85)
        top -= 0.08
    _fingerprint(fig, data, sid, top)
    drivers = _delta_panel(fig, data, sid, top)
    if drivers is not None:
        unsure = _unassigned_notes(data, drivers)
        _driver_panels(fig, data, sid, drivers, top - 0.43, bottom=0.15 if unsure else 0.1)
        if unsure:
            text_block(fig, 0.075, ["Sensitive to the unassigned lots: " + "; ".join(unsure)
                                    + "."], size=7.5, width=120, bottom=0.035)
    return _finish(fig, data, page)


def _unassigned_notes(data: Briefing, drivers: pd.DataFrame) -> list[str]:
    """The drivers the unassigned lots make or unmake (the check's notes in drivers.csv)."""
    out = []
    for analyte, note in drivers["note"].fillna("").astype(str).items():
        for part in note.split("; "):
            if part.startswith(("driver only when", "not a driver when")):
                # "acidity is a driver only when ..." / "acidity is not a driver when ..."
                words = f"a {part}" if part.startswith("driver") else part
                out.append(f"{data.label(str(analyte))} is {words}")
    return out


def _fingerprint(fig: Figure, data: Briefing, sid: str, top: float) -> None:
    """The style's medians against the range's, as robust z per analyte."""
    model = data.model
    stats = model.style_stats[model.style_stats["style"] == sid].set_index("analyte")
    analytes = list(model.analytes)
    ax = fig.add_axes([0.2, top - 0.36, 0.27, 0.33])
    tidy(ax)
    z = stats.loc[analytes, "robust_z"].to_numpy(dtype=float)
    pos = np.arange(len(analytes))[::-1]
    ax.barh(pos, z, color=data.colour(sid), height=0.7)
    ax.axvline(0, color="#999999", linewidth=0.6)
    ax.set_yticks(pos, [data.label(a) for a in analytes], fontsize=7)
    ax.set_xlabel("style median vs range\n(robust z, IQR units)", fontsize=7)
    ax.set_title("chemistry fingerprint", fontsize=8, loc="left")


def _delta_panel(fig: Figure, data: Briefing, sid: str, top: float) -> pd.DataFrame | None:
    """Cliff's delta of each analyte with its interval; the style's drivers rows, if profiled."""
    analytes = list(data.model.analytes)
    pos = np.arange(len(analytes))[::-1]
    ax = fig.add_axes([0.66, top - 0.36, 0.3, 0.33])
    tidy(ax)
    ax.set_title("drivers: marginal and conditional effects", fontsize=8, loc="left")
    if data.profiles is None:
        ax.text(0.5, 0.5, "no grades: not profiled", transform=ax.transAxes, ha="center",
                fontsize=9, color=MUTED)
        ax.set_yticks([])
        return None
    d = data.profiles.drivers
    drivers = d[d["style"] == sid].set_index("analyte").reindex(analytes)
    delta = drivers["cliffs_delta"].to_numpy(dtype=float)
    lows, highs = drivers["ci_low"].to_numpy(dtype=float), drivers["ci_high"].to_numpy(float)
    driver = drivers["is_driver"].fillna(False).astype(bool).to_numpy() & np.isfinite(delta)
    plain = ~driver & np.isfinite(delta)
    colour = data.colour(sid)
    ax.hlines(pos[driver], lows[driver], highs[driver], color=colour, linewidth=1.4)
    ax.hlines(pos[plain], lows[plain], highs[plain], color="#999999", linewidth=1.4)
    ax.scatter(delta[driver], pos[driver], s=22, c=colour, zorder=3)
    ax.scatter(delta[plain], pos[plain], s=22, facecolors="white", edgecolors="#999999",
               zorder=3)
    for k in np.flatnonzero(~np.isfinite(delta)):
        ax.text(0, pos[k], "insufficient", fontsize=6, color=MUTED, ha="center", va="center")
    # the conditional effect beside the marginal one: what is left once the style's other
    # analytes are known (a passenger's falls to 0)
    if "partial_rho" in drivers:
        rho = drivers["partial_rho"].to_numpy(dtype=float)
        r_lo = drivers["partial_ci_low"].to_numpy(dtype=float)
        r_hi = drivers["partial_ci_high"].to_numpy(dtype=float)
        ok = np.isfinite(rho)
        ax.hlines(pos[ok] - 0.32, r_lo[ok], r_hi[ok], color=INK, linewidth=0.9)
        ax.scatter(rho[ok], pos[ok] - 0.32, s=12, marker="D", c=INK, zorder=3)
    roles = (drivers["role"].fillna("").astype(str) if "role" in drivers
             else pd.Series("", index=drivers.index))
    moves = (drivers["moves_with"].fillna("").astype(str) if "moves_with" in drivers
             else pd.Series("", index=drivers.index))
    role_text = {"direct": " (direct)", "unclear": " (unclear)"}
    ticks = [data.label(a) + (f"\nrides on {data.label(m)}" if r == "indirect" and m
                              else role_text.get(r, ""))
             for a, r, m in zip(analytes, roles, moves)]
    ax.set_xlim(-1, 1)
    ax.set_ylim(-0.7, len(analytes) - 0.3)
    ax.axvline(0, color="#999999", linewidth=0.6)
    ax.set_yticks(pos, ticks, fontsize=6)
    settings = data.profiles.settings
    ax.set_xlabel(f"dots: Cliff's delta; diamonds: conditional effect\n"
                  f"(rank partial correlation with the grade); no units\n"
                  f"{100 * settings.ci_level:g} % CIs; filled: driver (q < {settings.fdr:g}, "
                  f"CI excludes 0)", fontsize=6)
    return drivers


def _driver_panels(fig: Figure, data: Briefing, sid: str, drivers: pd.DataFrame,
                   top: float, bottom: float = 0.1) -> None:
    """Boxplots by band of the style's top drivers, with their cuts and target windows."""
    chosen = drivers[drivers["is_driver"].astype(bool)]
    if "role" in chosen:  # direct drivers lead, passengers come last
        order = chosen["role"].fillna("").astype(str).map(ROLE_ORDER).fillna(2)
        chosen = chosen.assign(_order=order).sort_values(["_order", "rank"], kind="stable")
    else:
        chosen = chosen.sort_values("rank")
    chosen = chosen.head(data.config.report.top_drivers)
    if drivers["cliffs_delta"].isna().all():
        text_block(fig, top, ["Too few lots in the top or bottom band to profile this style: "
                              "no effect size is given (see the note in drivers.csv)."], size=9)
        return
    if chosen.empty:
        text_block(fig, top, ["No analyte separates top from bottom lots in this style at the "
                              f"false discovery rate {data.profile_settings.fdr:g}."], size=9)
        return
    thresholds = data.profiles.thresholds.set_index(["style", "analyte"])
    home, bands = data.lot_bands
    mask = home == sid
    width = 0.84 / len(chosen)
    fig.text(MARGIN, top + 0.005, "Top drivers by band (dashed: the Youden cut; shaded: the top "
             "band's target window)", fontsize=8, color=INK)
    for k, analyte in enumerate(chosen.index):
        ax = fig.add_axes([0.1 + k * width, bottom, width - 0.08, top - 0.04 - bottom])
        tidy(ax)
        values = observed(data.model.values, data.model.flags, analyte)[mask]
        _band_boxes(ax, data, values, bands[mask])
        _cut_marks(ax, data.label(analyte), thresholds.loc[(sid, analyte)])
        ax.set_ylabel(data.axis_label(analyte), fontsize=7)
        ax.set_xlabel("grade band", fontsize=7)


def _band_boxes(ax: Axes, data: Briefing, values: np.ndarray, bands: np.ndarray) -> None:
    """One box per grade band of an analyte's values, the band sizes under the ticks."""
    labels = data.bands.labels
    groups = [values[(bands == b) & np.isfinite(values)] for b in range(len(labels))]
    parts = ax.boxplot([g if g.size else [np.nan] for g in groups], widths=0.55,
                       patch_artist=True, showfliers=False)
    for patch, colour in zip(parts["boxes"], band_colours(len(labels))):
        patch.set_facecolor(colour)
        patch.set_alpha(0.55)
    ax.set_xticks(range(1, len(labels) + 1),
                  [f"{lab}\n(n={g.size})" for lab, g in zip(labels, groups)], fontsize=6)


def _cut_marks(ax: Axes, label: str, t: pd.Series) -> None:
    """A driver's target window (shaded) and Youden cut (dashed, named in the title)."""
    if np.isfinite(t["target_low"]):
        ax.axhspan(t["target_low"], t["target_high"], color="#0072B2", alpha=0.08)
    if np.isfinite(t["cut"]):
        ax.axhline(t["cut"], color=INK, linestyle="--", linewidth=0.9)
        # a Youden cut is a split, not a bound: say how many lots of each band lie past it
        side = "≥" if t["direction"] == "higher_better" else "≤"
        top, bottom = t.get("top_beyond_cut", np.nan), t.get("bottom_beyond_cut", np.nan)
        shares = (f"{side} cut: {100 * top:.0f} % of top, {100 * bottom:.0f} % of bottom lots"
                  if np.isfinite(top) and np.isfinite(bottom) else "")
        ax.set_title(f"{label}: cut {t['cut']:.4g} (J {t['youden_j']:.2f}, AUC {t['auc']:.2f})"
                     f"\n{shares}".rstrip(), fontsize=7, loc="left")


# --------------------------------------------------------------------------- where styles differ


def differences(data: Briefing, page: int) -> Figure:
    fig = new_page("Where styles differ",
                   "Cliff's delta of top vs bottom band per style and analyte; the pooled range "
                   "beside it. ● driver, ○ no clear effect, blank: insufficient lots.")
    if data.profiles is None:
        text_block(fig, 0.88, ["No grades were given, so styles could not be compared on "
                               "their drivers."], size=10)
        return _finish(fig, data, page)
    _delta_grid(fig, data, data.profiles.drivers, data.profiles.contrasts)
    fig.text(0.2, 0.395, "Red frame: a reversal (a driver in opposite directions in two "
             "trusted styles).", fontsize=7, color=WARN_COLOUR)
    y = heading(fig, 0.375, "What the comparisons say", size=10)
    sentences = _contrast_sentences(data.profiles.contrasts)
    y, written = text_block(fig, y, sentences, size=7.5, bullet="• ", width=120, gap=0.15,
                            bottom=0.075)
    if written < len(sentences):
        text_block(fig, y, [f"... {len(sentences) - written} more in contrasts.csv."], size=7.5,
                   bottom=0.03)
    return _finish(fig, data, page)


def _delta_grid(fig: Figure, data: Briefing, drivers: pd.DataFrame,
                contrasts: pd.DataFrame) -> None:
    """Cliff's delta per style (rows, the pooled range last) and analyte, reversals framed."""
    analytes = list(dict.fromkeys(drivers["analyte"]))
    rows = [*data.model.style_ids, POOLED]
    grid = np.full((len(rows), len(analytes)), np.nan)
    mark = np.full(grid.shape, "", dtype=object)
    table = drivers.set_index(["style", "analyte"])
    for i, sid in enumerate(rows):
        for j, a in enumerate(analytes):
            r = table.loc[(sid, a)]
            grid[i, j] = r["cliffs_delta"]
            if np.isfinite(r["cliffs_delta"]):
                mark[i, j] = "●" if r["is_driver"] else "○"
    ax = fig.add_axes([0.2, 0.52, 0.7, 0.36])
    image = ax.imshow(grid, cmap="PuOr_r", vmin=-1, vmax=1, aspect="auto")
    for i, j in zip(*np.nonzero(mark != "")):
        ax.text(j, i, mark[i, j], ha="center", va="center", fontsize=7,
                color="white" if abs(grid[i, j]) > 0.55 else INK)
    ax.axhline(len(rows) - 1.5, color=INK, linewidth=1.2)
    untrusted = set(_untrusted(data)["style"])
    ax.set_yticks(range(len(rows)), [f"{s}{' (untrusted)' if s in untrusted else ''}"
                                     if s != POOLED else "pooled (all)" for s in rows],
                  fontsize=7)
    ax.set_xticks(range(len(analytes)), [data.label(a) for a in analytes], fontsize=7,
                  rotation=55, ha="right")
    reversed_ = set(contrasts.loc[contrasts["kind"] == "reversal", "analyte"])
    for j, a in enumerate(analytes):
        if a in reversed_:
            ax.add_patch(Rectangle((j - 0.5, -0.5), 1, len(rows) - 1, fill=False,
                                   edgecolor=WARN_COLOUR, linewidth=1.6))
    bar = fig.colorbar(image, ax=ax, fraction=0.04, pad=0.02)
    bar.set_label("Cliff's delta (no unit): + higher value in top lots", fontsize=7)
    bar.ax.tick_params(labelsize=6)


def _contrast_sentences(contrasts: pd.DataFrame) -> list[str]:
    """The contrasts in words, reversals first, then misleading pooled results."""
    priority = {"reversal": 0, "pooled_misleading": 1, "style_specific": 2}
    ordered = contrasts.assign(_p=contrasts["kind"].map(priority)).sort_values("_p", kind="stable")
    sentences = [f"[{k.replace('_', ' ')}] {s}" for k, s in
                 zip(ordered["kind"], ordered["sentence"])]
    return sentences or ["No analyte drives the grade differently between trusted styles."]


# --------------------------------------------------------------------------- new lots


def new_lots_map(data: Briefing, page: int) -> Figure:
    placements = data.placements
    fig = new_page("New lots against the range",
                   "Grey: historical lots. Coloured: new lots in their style; black ×: fits no "
                   "style; ringed: atypical (named; the next page lists every new lot).")
    if placements is None or not len(placements.details):
        text_block(fig, 0.88, ["No new lot could be placed: every row was rejected (see "
                               "placements.csv for the reasons)."], size=10)
        return _finish(fig, data, page)
    model = data.model
    lots = model.lots
    ax = _map_axes(fig, [0.1, 0.3, 0.82, 0.6])
    history = data.map_sample
    ax.scatter(lots["map_x"].to_numpy()[history.index], lots["map_y"].to_numpy()[history.index],
               s=2, c="#DDDDDD", linewidths=0, rasterized=True)
    details = placements.details
    used = placements.lots[placements.lots["status"] == USED].drop_duplicates("lot_id")
    atypical_all = details["lot_id"].map(used.set_index("lot_id")["atypical"]).astype(bool)
    atypical_all = atypical_all.to_numpy()
    # many new lots: a seeded sample of them, stratified by style and by atypical, drawn
    # as pixels (vector markers cost bytes per lot)
    style_all = details["style"].to_numpy(dtype=object)
    fresh = map_sample(style_all + np.where(atypical_all, "|atypical", ""), data.map_points,
                       data.model.params.seed)
    raster = len(fresh.index) > MAX_VECTOR_DOTS
    x, y = details["map_x"].to_numpy()[fresh.index], details["map_y"].to_numpy()[fresh.index]
    style, atypical = style_all[fresh.index], atypical_all[fresh.index]
    none = style == UNASSIGNED
    ax.scatter(x[none], y[none], marker="x", s=28, c="black", linewidths=1.2, rasterized=raster)
    for sid in dict.fromkeys(style[~none]):
        mask = style == sid
        ax.scatter(x[mask], y[mask], s=22, c=data.colour(sid), edgecolors=INK, linewidths=0.4,
                   rasterized=raster)
    ax.scatter(x[atypical], y[atypical], s=90, facecolors="none", edgecolors=WARN_COLOUR,
               linewidths=1.0, rasterized=raster)
    # with many new lots, names would pile up: label the atypical ones, the table has the rest
    label = np.ones(len(x), dtype=bool) if len(details) <= LABEL_ALL else atypical
    lot_ids = details["lot_id"].to_numpy(dtype=object)[fresh.index]
    for k in np.flatnonzero(label)[:MAX_LABELLED]:
        ax.annotate(str(lot_ids[k]), (x[k], y[k]), fontsize=6, xytext=(4, 4),
                    textcoords="offset points", color=INK)
    n_atyp = int(used["atypical"].astype(bool).sum())
    notes = [
        f"{len(details)} new lots placed, {n_atyp} atypical; "
        f"{int((placements.lots['status'] != USED).sum())} rows rejected.",
        "A new lot's position is the weighted mean of its nearest historical lots' positions "
        "(the way UMAP starts new points).",
    ]
    if history.sampled:
        notes.append(f"Grey dots: {history.note('historical lots')}.")
    if fresh.sampled:
        notes.append(f"New lots drawn: {fresh.note('new lots')}, every style and the atypical "
                     f"lots keeping at least {fresh.floor:,} (or all theirs).")
    text_block(fig, 0.25, notes, size=8.5)
    return _finish(fig, data, page)


def new_lots_table(data: Briefing, page: int) -> Figure:
    placements = data.placements
    fig = new_page("New lots: style, typicality, indicative band, flags",
                   f"Band: {INDICATION}. {CAUTION}")
    used = placements.lots[placements.lots["status"] == USED]
    if not len(placements.details):
        text_block(fig, 0.88, ["No new lot could be placed."], size=10)
        return _finish(fig, data, page)
    details = placements.details.set_index("lot_id")
    header = f"{'lot':<14}{'style':<10}{'atypical':<10}{'band (top share)':<18}flags"
    ordered = pd.concat([used[used["atypical"].astype(bool)],
                         used[~used["atypical"].astype(bool)]])
    y = mono_block(fig, 0.91, [header], size=7, bold_first=True)
    line = 6.5 / 72 / PAGE[1] * LINE_ADVANCE
    shown = 0
    for r in ordered.itertuples():
        band = (f"{r.indicative_band} ({r.share_top:.0%})" if r.indicative_band else "-")
        style = "no style" if r.style == UNASSIGNED else r.style
        first = f"{str(r.lot_id)[:13]:<14}{style:<10}{'YES' if r.atypical else '':<10}" \
                f"{band[:17]:<18}"
        # a lot with no flag worth showing has an empty flags_short: "-" in the table
        chunks = wrap(str(details.loc[r.lot_id, "flags_short"]) or "-", 62)
        if len(chunks) > 2:
            chunks = [chunks[0], chunks[1][:58] + " ..."]
        if y - line * len(chunks) < 0.07 or shown >= MAX_TABLE_ROWS:
            break
        text = [first + chunks[0]] + [" " * len(first) + c for c in chunks[1:]]
        fig.text(MARGIN, y, "\n".join(text), fontsize=6.5, family="monospace", va="top",
                 color=WARN_COLOUR if r.atypical else INK, linespacing=LINESPACING)
        y -= line * len(text) + line * 0.25
        shown += 1
    if len(ordered) > shown:
        fig.text(MARGIN, 0.05, f"... {len(ordered) - shown} more lots in placements.csv "
                 "(atypical lots listed first).", fontsize=7, color=MUTED)
    return _finish(fig, data, page)


# --------------------------------------------------------------------------- data quality


def data_quality(data: Briefing, page: int) -> Figure:
    model = data.model
    fig = new_page("Data quality", "Every input row is accounted for: rows read = used + "
                   "rejected.")
    rows = model.rows
    n, used = len(rows), int((rows["status"] == USED).sum())
    counts = reason_counts(rows["status"])
    y, _ = text_block(fig, 0.9, [
        f"{model.source.name}: {n} rows read, {used} used, {n - used} rejected.",
        "Rejected rows keep their place in every per-lot file with their reason as status; "
        "row_status.csv names the row, the column and the value.",
    ], size=9)
    if len(counts):
        ax = fig.add_axes([0.3, y - 0.2, 0.6, 0.18])
        tidy(ax)
        ax.barh(range(len(counts)), counts.to_numpy(), color="#D55E00")
        ax.set_yticks(range(len(counts)), list(counts.index), fontsize=7)
        ax.set_xlabel("rejected rows (count)", fontsize=7)
        y -= 0.24
    y = heading(fig, y, "Per analyte (used lots)", size=10)
    rows = [f"{'analyte':<24}{'unit':<30}{'imputed':>9}{'censored':>10}{'measured':>10}"]
    for spec in model.specs:
        flags = model.flags[spec.name]
        imputed = int((flags == MISSING).sum())
        censored = int(flags.isin([CENSORED_BELOW, CENSORED_ABOVE]).sum())
        unit = spec.unit if spec.unit_in == spec.unit else f"{spec.unit_in} -> {spec.unit}"
        dropped = " (constant: dropped)" if spec.name in model.scaler.dropped else ""
        rows.append(f"{spec.name[:23]:<24}{unit[:29]:<30}{imputed:>9}{censored:>10}"
                    f"{len(flags) - imputed - censored:>10}{dropped}")
    y = mono_block(fig, y, rows, size=7.5, bold_first=True)
    text_block(fig, y - 0.02, [
        "Imputed: missing cells of used lots, filled from the "
        f"{data.model.config.segment.impute_neighbours} most similar lots (scaled "
        "chemistry) for the styles only; profiles leave them out.",
        "Censored: values written below (or above) a detection limit, stored by the "
        f"'{data.model.config.ingest.censored}' rule and flagged per cell.",
    ], size=8)
    return _finish(fig, data, page)


# --------------------------------------------------------------------------- methods and cautions


def methods_text(prof: ProfileSettings, min_style_lots: int,
                 atypical_percentile: float) -> list[str]:
    """The methods and cautions, with the settings of the results in them.

    Parameters
    ----------
    prof : ProfileSettings
        The settings the profiles were computed with.
    min_style_lots : int
        The model's ``segment.min_style_lots``.
    atypical_percentile : float
        The placements' ``place.atypical_percentile``.

    Returns
    -------
    list of str
        One paragraph per item.
    """
    level = f"{100 * prof.ci_level:g} %"
    low, high = prof.target_quantiles
    window = f"{100 * (high - low):g} %"
    return [
        "Styles come from the chemistry alone: grades never shape them. Each analyte is "
        "log-transformed when strongly right-skewed, then scaled by its median and interquartile "
        "range; UMAP reduces the scaled chemistry to a clustering space and HDBSCAN finds dense "
        "groups there. A style is a group of lots whose chemistry resembles each other's more "
        "than the rest of the range; it need not match a commercial category.",
        "Grade bands: lots are compared top band against bottom band inside each style. Cliff's "
        "delta is the probability that a top lot has the higher value minus the probability "
        "that it has the lower (from -1 to +1; Romano et al. 2006 call |delta| below 0.147 "
        "negligible, below 0.33 small, below 0.474 medium, above large). Its "
        f"{level} interval is the bias-corrected and accelerated (BCa) interval of a seeded "
        f"bootstrap of {prof.bootstrap} resamples. Hedges' g is the standardised mean "
        "difference. A driver's conditional effect is its rank partial correlation with the "
        "grade once the style's other analytes are known: 'direct' where its interval excludes "
        "0, a passenger ('moves with ...') where it vanishes beside another driver.",
        "A driver is an analyte whose top and bottom lots differ beyond chance: its "
        "Brunner-Munzel p-value (a test of P(top > bottom) = 1/2, what delta measures), "
        "corrected by the Benjamini-Hochberg false discovery rate over "
        "every style and analyte of the briefing (the pooled rows form a family of their own), "
        f"is below {prof.fdr:g} and its delta interval excludes 0. A driver describes an "
        "association in these lots; it is not proof that changing the analyte changes the grade.",
        "Thresholds: the Youden cut is the value that best separates top from bottom lots "
        "(maximum sensitivity + specificity - 1), its interval from a smoothed bootstrap of "
        f"the same resamples; the target window is the central {window} of "
        "the top band's values. Neither is a specification: lots on the wrong side of a cut can "
        "grade well and the reverse.",
        f"Sample sizes: a band with fewer than {prof.min_band_lots} lots gets no effect size "
        f"('insufficient'), and a style with fewer than {min_style_lots} lots, or too few "
        "top or bottom lots, is marked untrusted; its numbers are shown but should not guide "
        "decisions. Pooled results over the whole range mix styles and can hide a driver or "
        "reverse it; the 'where styles differ' page says where.",
        "New lots: a new lot is placed among the historical lots by its chemistry; 'atypical' "
        "means its chemistry is unusual for its style (outlier score above the "
        f"{atypical_percentile:g}th percentile of the historical lots), 'fits no "
        "style' that it resembles none. The indicative band is the share of its nearest "
        "historical lots of the same style in each band: an indication from neighbours, not a "
        "forecast of its grade. A driver flag judges a lot on its style's drivers together: its "
        "place on each (its percentile among the style's lots) weighted by the driver's Cliff's "
        "delta gives a driver score, and the lot is flagged only where the style's bottom-band "
        "lots outnumber its top-band ones at that score; the flag names the one to three "
        "drivers that pull the score down most.",
        "Screening limits (volatile acidity and total SO2 maxima, the sulfite labelling line, a "
        "low molecular SO2 warning) are screening flags only, never compliance verdicts: a lot "
        "is flagged for a sulfite statement, it is not told it needs one (under the OIV, which "
        "sets no labelling line, the EU line is used). " + VA_EXCEPTIONS + " Certified "
        "laboratory analyses and the regulation in force decide.",
    ]


def methods(data: Briefing, page: int) -> Figure:
    fig = new_page("Methods and cautions", "What the numbers mean, and what they do not.")
    text = methods_text(data.profile_settings, data.model.config.segment.min_style_lots,
                        data.place_settings.atypical_percentile)
    text_block(fig, 0.9, text, size=9, width=100, gap=0.6)
    return _finish(fig, data, page)


# --------------------------------------------------------------------------- provenance


def provenance(data: Briefing, page: int) -> Figure:
    model = data.model
    fig = new_page("Provenance", "Same input, config and seed give the same outputs.")
    source = model.source
    params = model.params
    lines = [
        f"input file: {source.name} ({source.format}"
        + (f", {source.delimiter}-delimited" if source.delimiter else "")
        + (f", sheet {source.sheet}" if source.sheet else "") + ")",
        f"input SHA-256: {source.sha256}",
        f"config: {model.config.source}",
        f"seed: {params.seed}",
        f"clustering: space {params.space}, components {params.components}, neighbours "
        f"{params.neighbours}, epochs {params.epochs}, min_cluster_size "
        f"{params.min_cluster_size}, min_samples {params.min_samples}",
    ]
    for name, result in (("profiles", data.profiles), ("placements", data.placements)):
        if result is not None:
            lines.append(f"{name}: {json.dumps(result.settings.to_dict(), sort_keys=True)}")
    lines += [f"briefing config: {data.config.source}",
              "software: " + ", ".join(f"{k} {v}" for k, v in model.versions.items())]
    y, _ = text_block(fig, 0.9, lines, size=8.5, width=110, gap=0.2)
    y = heading(fig, y - 0.01, "Configuration of the model", size=10)
    config_lines = [f"{key}: {json.dumps(value, sort_keys=True)}"
                    for key, value in sorted(model.config.to_dict().items())]
    text_block(fig, y, config_lines, size=6.5, width=150, gap=0.15, bottom=0.04)
    return _finish(fig, data, page)


# --------------------------------------------------------------------------- since the previous

MAX_SHIFTS = 4  # median shifts listed per style


def _shift_rows(data: Briefing, comparison: Comparison) -> list[str]:
    """The clearest median shifts of each kept style: interval clear of 0, largest in IQRs."""
    shifts = comparison.shifts
    clear = shifts[(shifts["ci_low"] > 0) | (shifts["ci_high"] < 0)].copy()
    clear["size"] = (clear["shift"].abs() / clear["iqr_previous"].where(
        clear["iqr_previous"] > 0)).fillna(0.0)
    rows = []
    for style, group in clear.groupby("style", sort=False):
        for r in group.sort_values("size", ascending=False, kind="stable").head(MAX_SHIFTS)\
                .itertuples():
            unit = data.model.spec(r.analyte).unit
            rows.append(f"{style:<6}{data.label(r.analyte)[:20]:<21}"
                        f"{r.median_previous:>9.3g} -> {r.median:<9.3g}{unit[:12]:<13}"
                        f"{r.shift:>+9.3g}  [{r.ci_low:+.3g}, {r.ci_high:+.3g}]")
    return rows


def since_previous(data: Briefing, page: int) -> Figure:
    """Sizes then and now, median shifts with intervals, drivers that appeared or vanished."""
    comparison = data.comparison
    record = data.model.previous
    fig = new_page("Since the previous model",
                   f"Styles matched to the previous model (lots of {record.get('source', '?')}) "
                   "by their centres in its scaled chemistry, at most "
                   f"{float(record.get('limit', 0)):g} style spreads apart; a matched style "
                   "keeps its id and its name.")
    if comparison is None:
        text_block(fig, 0.88, ["No previous model was given."], size=10)
        return _finish(fig, data, page)
    y = heading(fig, 0.89, "Styles then and now", size=10)
    rows = [f"{'style':<8}{'name':<61}{'lots then':>10}{'lots now':>10}  status"]
    for r in comparison.styles.itertuples():
        sid = r.style or r.previous_style
        name = r.style_name if r.status in (KEPT, NEW) else r.previous_name
        then = "" if r.status == NEW else str(r.n_previous)
        now = str(r.n_lots) if r.status != "vanished" else ""
        rows.append(f"{sid:<8}{str(name)[:60]:<61}{then:>10}{now:>10}  {r.status}")
    y = mono_block(fig, y, rows[:24], size=7.5, bold_first=True)
    level = f"{100 * comparison.level:.0f} %"
    y = heading(fig, y - 0.015, f"Median shifts of the kept styles ({level} bootstrap "
                "intervals, clear of zero)", size=10)
    shifts = _shift_rows(data, comparison)
    if shifts:
        head = (f"{'style':<6}{'analyte':<21}{'then':>9} -> {'now':<9}{'unit':<13}"
                f"{'shift':>9}  interval")
        y = mono_block(fig, y, [head, *shifts[:28]], size=7, bold_first=True)
    else:
        y, _ = text_block(fig, y, ["No median moved clearly (every interval holds zero)."],
                          size=8.5)
    y = heading(fig, y - 0.015, "Drivers that appeared or vanished", size=10)
    drivers = comparison.drivers
    if data.profiles is None or not data.model.has_grade:
        lines = ["Without grades in both models the drivers cannot be compared."]
    elif drivers.empty:
        lines = ["The kept styles have the same drivers as before."]
    else:
        lines = [f"{style}: " + "; ".join(
            f"{data.label(r.analyte)} {r.change}" for r in group.itertuples())
            for style, group in drivers.groupby("style", sort=False)]
    text_block(fig, y, lines, size=8, bottom=0.05)
    return _finish(fig, data, page)

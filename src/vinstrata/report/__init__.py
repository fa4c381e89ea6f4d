"""The buyer briefing: a PDF written with matplotlib's PDF backend.

Pages, in order: cover; the map; how the styles were chosen; one card per
style; where styles differ; since the previous model (when the model's
styles were matched to one and it is given); new lots (map and table, when
placements are given); data quality; methods and cautions; provenance. The
page count is therefore 7 + the number of styles, plus 1 with a previous
model, plus 2 with new lots.
"""

from __future__ import annotations

import datetime as _dt
import os
from pathlib import Path

from vinstrata.config import Config
from vinstrata.place.placing import Placements
from vinstrata.profile.drivers import Profiles
from vinstrata.report import layout, pages
from vinstrata.report.pages import Briefing
from vinstrata.segment.model import StyleModel
from vinstrata.segment.previous import Comparison, compare_models

RASTER_DPI = 130  # resolution of the rasterised scatter layers; text stays vector


def briefing_date() -> str:
    """Today, or the date of ``SOURCE_DATE_EPOCH`` when set (for reproducible files)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.isdigit():
        return _dt.datetime.fromtimestamp(int(epoch), tz=_dt.timezone.utc).date().isoformat()
    return _dt.date.today().isoformat()


def page_count(n_styles: int, with_placements: bool, with_previous: bool = False) -> int:
    """Pages of a briefing: 7 fixed pages, one per style, one more with a previous model,
    two more with new lots."""
    return 7 + n_styles + (1 if with_previous else 0) + (2 if with_placements else 0)


def _comparison(model: StyleModel, profiles: Profiles | None, previous: StyleModel | None,
                previous_profiles: Profiles | None) -> Comparison | None:
    """What changed since the previous model (its drivers profiled when both have grades)."""
    if previous is None:
        return None
    if previous_profiles is None and profiles is not None and previous.has_grade:
        from vinstrata.profile.drivers import profile_styles

        previous_profiles = profile_styles(previous, pooled=False, cut_intervals=False)
    return compare_models(model, previous, profiles, previous_profiles)


def gather(model: StyleModel, profiles: Profiles | None = None,
           placements: Placements | None = None, config: Config | None = None,
           previous: StyleModel | None = None, previous_profiles: Profiles | None = None,
           map_points: int = pages.MAP_POINTS) -> Briefing:
    """Everything the pages draw (the parameters are those of :func:`write_briefing`).

    Returns
    -------
    Briefing
    """
    config = config or model.config
    date = briefing_date()
    return Briefing(
        model=model, config=config, profiles=profiles, placements=placements,
        date=date, title=config.report.title,
        foot=f"{config.report.title} · {model.source.name} · {date}",
        style_index={sid: i for i, sid in enumerate(model.style_ids)},
        comparison=_comparison(model, profiles, previous, previous_profiles),
        map_points=map_points,
    )


def write_briefing(path: str | Path, model: StyleModel, profiles: Profiles | None = None,
                   placements: Placements | None = None, config: Config | None = None,
                   previous: StyleModel | None = None,
                   previous_profiles: Profiles | None = None,
                   map_points: int = pages.MAP_POINTS) -> Path:
    """Write the briefing PDF.

    Parameters
    ----------
    path : str or Path
        The PDF to write (its folder is created).
    model : StyleModel
    profiles : Profiles, optional
        Drivers, thresholds and contrasts; without them the pages say so.
    placements : Placements, optional
        New lots; adds the two new-lot pages.
    config : Config, optional
        The briefing's own settings (``[report]``); the model's config when None.
        Every number stated about a result comes from the result itself.
    previous : StyleModel, optional
        The previous model the model's styles were matched to (``segment
        --previous``); adds the page "since the previous model".
    previous_profiles : Profiles, optional
        Its profiles, for the drivers that appeared or vanished; computed from
        it when left out and both models have grades.
    map_points : int
        Lots a map draws at most; beyond it the maps draw a seeded sample,
        stratified by style, and say so on the page.

    Returns
    -------
    Path
    """
    from matplotlib.backends.backend_pdf import PdfPages

    from vinstrata.folders import atomic_path

    config = config or model.config
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    data = gather(model, profiles, placements, config, previous, previous_profiles, map_points)
    builders = [pages.cover, pages.maps, pages.segmentation]
    builders += [lambda d, p, sid=sid: pages.style_card(d, sid, p) for sid in model.style_ids]
    builders.append(pages.differences)
    if previous is not None:
        builders.append(pages.since_previous)
    if placements is not None:
        builders += [pages.new_lots_map, pages.new_lots_table]
    builders += [pages.data_quality, pages.methods, pages.provenance]
    metadata = {"Title": config.report.title, "Author": config.report.producer or "vinstrata",
                "Creator": "vinstrata", "Producer": "vinstrata (matplotlib)",
                "CreationDate": None, "ModDate": None}
    # written under a temporary name and renamed: an interrupted briefing leaves the old one
    with atomic_path(path) as temp, layout.literal_text(), PdfPages(temp, metadata=metadata) as pdf:
        for number, build in enumerate(builders, start=1):
            figure = build(data, number)
            pdf.savefig(figure, dpi=RASTER_DPI)
    return path

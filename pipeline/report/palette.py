"""The visual language of every chart: colours, type sizes and the shared config.

One rule carries the whole design: **colour means platform**, and a platform has the
same colour in every chart of a run. Everything else (cohort, state, coder) is shown
by position, facet, line dash or a grey level, so a colour never has to be looked up
twice and no two meanings compete for it.

Platform colours come from the eight-colour set of Okabe & Ito (2008), which stays
distinguishable under the common forms of colour-vision deficiency. Yellow and black
go last: yellow has little contrast on white and black is kept for model estimates.
A ninth and later platform reuses the cycle; lanes and legends then still name it.

References
----------
Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*FLY Data Depository.
https://jfly.uni-koeln.de/color/
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable

#: Okabe & Ito (2008), in the order platforms receive them.
OKABE_ITO: tuple[tuple[str, str], ...] = (
    ("blue", "#0072B2"),
    ("orange", "#E69F00"),
    ("bluish green", "#009E73"),
    ("vermillion", "#D55E00"),
    ("reddish purple", "#CC79A7"),
    ("sky blue", "#56B4E9"),
    ("yellow", "#F0E442"),
    ("black", "#000000"),
)
PLATFORM_COLOURS: tuple[str, ...] = tuple(hex_ for _, hex_ in OKABE_ITO)

#: Grey levels for cohorts (luminance differs, so they survive any colour vision and
#: greyscale printing). More cohorts than levels reuse them with a different dash.
COHORT_GREYS: tuple[str, ...] = ("#303030", "#8C8C8C", "#C4C4C4", "#5E5E5E", "#A8A8A8")
COHORT_DASHES: tuple[tuple[int, ...], ...] = ((1, 0), (6, 3), (2, 2), (8, 2, 2, 2), (4, 4))

ESTIMATE_COLOUR = "#000000"  # model estimates and their intervals
NEUTRAL = "#595959"  # data points that are not a platform
BAND = "#D9D9D9"  # baseline bands, reference regions
UNCODED = "#BDBDBD"  # uncoded seconds in the timeline
FLAG = "#D55E00"  # a QC flag (vermillion, shared with no meaning in QC charts)

FONT = "DejaVu Sans, Liberation Sans, Arial, Helvetica, sans-serif"

#: Sizes in CSS pixels at 1x. Charts are drawn about 1000-1400 px wide and shown on a
#: 13.3-inch slide, where a 16 px label is about 12-14 pt.
WIDTH = 760
FONT_SIZE = {"title": 24, "subtitle": 17, "axis_title": 18, "label": 16, "legend": 16}


@dataclass(frozen=True)
class Palette:
    """Colours of one run: platform code -> colour, fixed by the vocabulary order.

    ``platforms`` is the vocabulary order (the ``[platforms.groups]`` order of the
    resolved configuration, else the sorted codes seen); ``labels`` maps a code to the
    text shown for it. ``cohorts`` is the cohort order (reference first).
    """

    platforms: tuple[str, ...]
    labels: dict[str, str] = field(default_factory=dict)
    cohorts: tuple[str, ...] = ()

    def colour(self, code: str) -> str:
        try:
            i = self.platforms.index(code)
        except ValueError:
            raise KeyError(f"platform {code!r} is not in the run's vocabulary") from None
        return PLATFORM_COLOURS[i % len(PLATFORM_COLOURS)]

    def label(self, code: str) -> str:
        return self.labels.get(code, code)

    @property
    def platform_labels(self) -> list[str]:
        return [self.label(c) for c in self.platforms]

    def platform_scale(self) -> dict:
        """Vega-Lite scale mapping platform labels to their colours (fixed domain)."""
        return {"domain": self.platform_labels,
                "range": [self.colour(c) for c in self.platforms]}

    def cohort_scale(self) -> dict:
        return {"domain": list(self.cohorts),
                "range": [COHORT_GREYS[i % len(COHORT_GREYS)] for i in range(len(self.cohorts))]}

    def cohort_dash_scale(self) -> dict:
        return {"domain": list(self.cohorts),
                "range": [list(COHORT_DASHES[i % len(COHORT_DASHES)])
                          for i in range(len(self.cohorts))]}


def build_palette(vocabulary: Iterable[str], seen: Iterable[str] = (),
                  labels: dict[str, str] | None = None,
                  cohorts: Iterable[str] = ()) -> Palette:
    """Fix platform colours: vocabulary order first, then any other code seen, sorted.

    The same vocabulary always gives the same colours, whatever the data of a run.
    """
    order = list(dict.fromkeys(str(v) for v in vocabulary))
    extra = sorted({str(s) for s in seen} - set(order))
    return Palette(tuple(order + extra), dict(labels or {}), tuple(cohorts))


def vega_config() -> dict:
    """The shared Vega-Lite ``config`` block: type, sizes, no chart border."""
    return {
        "font": FONT,
        "background": "white",
        "padding": 12,
        "view": {"stroke": None, "continuousWidth": WIDTH, "continuousHeight": 300},
        "title": {"fontSize": FONT_SIZE["title"], "subtitleFontSize": FONT_SIZE["subtitle"],
                  "anchor": "start", "fontWeight": "bold", "subtitleColor": "#404040",
                  "offset": 14},
        "axis": {"titleFontSize": FONT_SIZE["axis_title"], "labelFontSize": FONT_SIZE["label"],
                 "titleFontWeight": "normal", "gridColor": "#E6E6E6", "domainColor": "#7F7F7F",
                 "tickColor": "#7F7F7F", "labelColor": "#262626", "titleColor": "#262626",
                 "labelLimit": 260},
        "header": {"titleFontSize": FONT_SIZE["axis_title"],
                   "labelFontSize": FONT_SIZE["axis_title"], "labelFontWeight": "bold"},
        "legend": {"titleFontSize": FONT_SIZE["legend"], "labelFontSize": FONT_SIZE["legend"],
                   "titleFontWeight": "normal", "symbolSize": 180, "labelLimit": 260,
                   "orient": "right"},
        "concat": {"spacing": 28},
        "facet": {"spacing": 24},
    }

"""Write each chart as PNG (2x, for slides), SVG and self-contained HTML.

Rendering goes through vl-convert (a bundled Vega engine, no browser, no network).
The HTML files inline the Vega, Vega-Lite and Vega-Embed JavaScript once each, so
they open offline; the bundle is built once per report and shared.
"""

from __future__ import annotations

import base64
import hashlib
import json
import struct
import textwrap
from dataclasses import dataclass
from functools import lru_cache
from html import escape
from pathlib import Path

import altair as alt
import vl_convert as vlc

from pipeline.errors import StageError
from pipeline.report.charts import Figure
from pipeline.report.palette import vega_config

PNG_SCALE = 2



def csp(*scripts: str) -> str:
    """Content-Security-Policy of a page: no network, ever, and only our own scripts.

    Scripts are allowed by the SHA-256 of their text, so an inline script or event
    handler that slipped into the page would not run even if escaping failed.
    ('unsafe-eval' is needed by Vega, which compiles its expressions.)
    """
    hashes = " ".join(f"'sha256-{base64.b64encode(hashlib.sha256(s.encode()).digest()).decode()}'"
                      for s in scripts)
    return (f"default-src 'none'; script-src {hashes} 'unsafe-eval'; "
            "style-src 'unsafe-inline'; img-src data: blob:; font-src data:; connect-src 'none'; "
            "base-uri 'none'; form-action 'none'")


@lru_cache(maxsize=1)
def vl_version() -> str | None:
    """The Vega-Lite version Altair writes, if vl-convert has it (else its latest)."""
    major_minor = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return major_minor if major_minor in vlc.get_vegalite_versions() else None


def javascript_bundle() -> str:
    """Vega, Vega-Lite and Vega-Embed as one inline script (about 0.9 MB)."""
    js = vlc.javascript_bundle(vl_version=vl_version())
    # cannot end the <script> element it is placed in
    return js.replace("</script", "<\\/script").replace("<!--", "<\\!--")


def to_spec(fig: Figure) -> dict:
    """The Vega-Lite spec of a figure (validated by Altair), with the shared config."""
    spec = fig.chart.to_dict()
    spec.pop("$schema", None)
    spec["config"] = vega_config()
    return spec


def with_title(fig: Figure, spec: dict) -> dict:
    """A copy of ``spec`` titled with the finding, the caption as subtitle."""
    titled = dict(spec)
    titled["title"] = {"text": textwrap.wrap(fig.finding, 90) or [fig.finding],
                       "subtitle": textwrap.wrap(fig.caption, 120)}
    return titled


def script_json(obj) -> str:
    """JSON safe inside a <script> element: no '<', '>' or '&' can end or open tags."""
    text = json.dumps(obj, ensure_ascii=False, allow_nan=False)
    return (text.replace("&", "\\u0026").replace("<", "\\u003c").replace(">", "\\u003e")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))


def png_size(png: bytes) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk."""
    if png[:8] != b"\x89PNG\r\n\x1a\n":
        raise StageError("vl-convert returned something that is not a PNG", stage="report")
    return struct.unpack(">II", png[16:24])


def render_svg(spec: dict) -> str:
    return vlc.vegalite_to_svg(spec, vl_version=vl_version())


def svg_png(svg: str, scale: float = PNG_SCALE) -> bytes:
    """Rasterise a rendered SVG (much cheaper than running Vega a second time)."""
    return vlc.svg_to_png(svg, scale=scale)


#: Renders each spec into its container; any failure goes to the console and the page.
EMBED_JS = """
(function () {
  var opts = {renderer: "svg", actions: {export: true, source: false, compiled: false,
              editor: false}, tooltip: true};
  document.querySelectorAll("[data-spec]").forEach(function (el) {
    var spec = JSON.parse(document.getElementById(el.getAttribute("data-spec")).textContent);
    vegaEmbed(el, spec, opts).then(function () {
      el.setAttribute("data-rendered", "yes");
    }).catch(function (err) {
      el.setAttribute("data-rendered", "error");
      el.textContent = "This chart could not be drawn: " + err;
      console.error("chart " + el.id + ": " + err);
    });
  });
})();
"""


def chart_html(fig: Figure, spec: dict, bundle: str) -> str:
    """A standalone, offline HTML page for one chart."""
    return f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{csp(bundle, EMBED_JS)}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{escape(fig.finding)}</title>
<style>
body {{ font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; margin: 2rem;
       color: #1a1a1a; max-width: 72rem; }}
h1 {{ font-size: 1.5rem; }} p {{ line-height: 1.45; }} .detail {{ color: #404040; }}
</style>
</head>
<body>
<h1>{escape(fig.finding)}</h1>
<p class="detail">{escape(fig.detail)}</p>
<div class="chart" id="chart-{escape(fig.name)}" data-spec="spec-{escape(fig.name)}"></div>
<p>{escape(fig.caption)}</p>
<p class="detail">{escape(fig.method)}</p>
<script>{bundle}</script>
<script type="application/json" id="spec-{escape(fig.name)}">{script_json(spec)}</script>
<script>{EMBED_JS}</script>
</body>
</html>
"""


@dataclass
class ChartFiles:
    """What was written for one figure."""

    figure: Figure
    png: Path
    svg: Path
    html: Path
    width_px: int
    height_px: int
    spec: dict  # untitled spec, for the report page
    slide_png: bytes  # untitled 2x PNG for the deck


def write_chart(fig: Figure, charts_dir: Path, bundle: str) -> ChartFiles:
    plain = to_spec(fig)
    titled = with_title(fig, plain)
    try:
        svg = render_svg(titled)
        slide = svg_png(render_svg(plain))
    except ValueError as err:  # vl-convert reports a bad spec as ValueError
        raise StageError(f"chart {fig.name!r} could not be rendered: {err}",
                         stage="report") from None
    png = svg_png(svg)
    paths = {ext: charts_dir / f"{fig.name}.{ext}" for ext in ("png", "svg", "html")}
    paths["png"].write_bytes(png)
    paths["svg"].write_text(svg, encoding="utf-8")
    paths["html"].write_text(chart_html(fig, plain, bundle), encoding="utf-8")
    w, h = png_size(png)
    return ChartFiles(fig, paths["png"], paths["svg"], paths["html"], w, h, plain, slide)

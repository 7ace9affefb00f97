"""report.html: one self-contained findings page that opens anywhere, offline.

Everything is inline: styles, the Vega JavaScript (once), each chart's spec as JSON
in a ``<script type="application/json">`` element. A Content-Security-Policy forbids
any network access. Every string that comes from the user's study (study name,
platform codes and labels, IDs, cohorts, notes) goes through :func:`html.escape`
in the page, and through :func:`~pipeline.report.export.script_json` inside scripts,
where Vega draws it as text, never as markup.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from html import escape

import pandas as pd

from pipeline import __version__
from pipeline.report import findings as F
from pipeline.report import numbers as fmt
from pipeline.report.charts import CHARTS
from pipeline.report.export import EMBED_JS, ChartFiles, csp, script_json
from pipeline.report.methods_text import Methods
from pipeline.report.run_files import TABLE_PATHS, RunFiles

#: Event-level tables longer than this are named with their row count, not printed.
MAX_APPENDIX_ROWS = 5000
MAX_HEADLINES = 6

PRIVACY = (
    "This report describes people. It lists participant and session IDs, and its "
    "timeline chart shows second by second when one participant used which media at home "
    "and how their skin conductance changed: treat the page, the deck and the run folder "
    "as personal data.",
    "Participant IDs should be pseudonyms. Keep the key that links them to people "
    "separate from this report and never send the two together.",
    "Physiological recordings can count as health data under data-protection law. The run "
    "folder's timeline/ files and the study's signals/ folder hold them second by second; "
    "they are not needed to read this report and should not travel with it.",
    "Share the report only with people covered by the participants' consent and the "
    "study's ethics approval; do not post it publicly. With few participants per cohort, "
    "a cohort's numbers can point to individuals.",
    "Delete copies when they are no longer needed, as the study's data management plan "
    "says.",
)

STYLE = """
:root { --ink: #1a1a1a; --muted: #4d4d4d; --rule: #d9d9d9; --band: #f4f4f4; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, Helvetica, sans-serif;
       color: var(--ink); margin: 0; line-height: 1.5; font-size: 16px; }
main { max-width: 76rem; margin: 0 auto; padding: 1.5rem 2rem 4rem; }
header { border-bottom: 3px solid var(--ink); padding-bottom: 0.8rem; margin-bottom: 1.2rem; }
h1 { font-size: 2rem; margin: 0 0 0.3rem; } h2 { font-size: 1.45rem; margin-top: 2.6rem;
  border-bottom: 1px solid var(--rule); padding-bottom: 0.2rem; }
h3 { font-size: 1.15rem; margin: 1.6rem 0 0.3rem; }
.meta, .detail, figcaption, .note { color: var(--muted); }
nav ol { columns: 2; padding-left: 1.2rem; } nav a { color: var(--ink); }
.headline li { margin: 0.45rem 0; } .headline strong { font-weight: 700; }
figure { margin: 1.4rem 0 2.4rem; padding: 1rem 1.2rem; background: #fff;
         border: 1px solid var(--rule); border-radius: 4px; }
figure h3 { margin-top: 0; } .chart { overflow-x: auto; min-height: 2rem; }
.chart svg { max-width: 100%; height: auto; }
figcaption { font-size: 0.95rem; margin-top: 0.4rem; }
.files { font-size: 0.85rem; } .files a { color: var(--muted); }
table { border-collapse: collapse; font-size: 0.82rem; margin: 0.6rem 0 1.2rem; }
th, td { border-bottom: 1px solid var(--rule); padding: 0.2rem 0.55rem; text-align: left;
         vertical-align: top; }
th { background: var(--band); position: sticky; top: 0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.scroll { max-height: 28rem; overflow: auto; border: 1px solid var(--rule); }
details { margin: 0.5rem 0; } summary { cursor: pointer; font-weight: 600; }
.refs li { margin: 0.25rem 0; } .omitted li { margin: 0.3rem 0; }
.caution { background: var(--band); border-left: 4px solid var(--ink); padding: 0.6rem 1rem; }
@media print { .chart { overflow: visible; } details { display: block; } .scroll { max-height: none; } }
"""


def _cell(v) -> tuple[str, bool]:
    """Display text of a table cell (full value, rounded for reading) and whether numeric."""
    if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
        return "", False
    if isinstance(v, bool):
        return ("true" if v else "false"), False
    if isinstance(v, int) or (isinstance(v, float) and float(v).is_integer() and abs(v) < 1e15):
        return f"{int(v)}", True
    if isinstance(v, float):
        return f"{v:.4g}", True
    return str(v), False


def table_html(df: pd.DataFrame, max_rows: int | None = None) -> str:
    """An escaped HTML table of ``df`` (rounded to 4 significant digits for reading)."""
    rows = df if max_rows is None else df.head(max_rows)
    head = "".join(f"<th>{escape(str(c))}</th>" for c in rows.columns)
    body = []
    for rec in rows.astype(object).itertuples(index=False, name=None):
        cells = []
        for v in rec:
            text, is_num = _cell(v)
            cells.append(f'<td class="num">{escape(text)}</td>' if is_num
                         else f"<td>{escape(text)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<div class="scroll"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _when(run: RunFiles) -> str:
    created = run.manifest.get("created") or run.manifest.get("finished")
    if created:
        return str(created)
    stamp = (run.out_dir / "manifest.json").stat().st_mtime
    return datetime.fromtimestamp(stamp, tz=timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def headline_items(run: RunFiles, charts: list[ChartFiles]) -> list[str]:
    """Headline findings as escaped HTML list items: model results, then the data."""
    items = []
    q = float((run.config.get("models") or {}).get("fdr_q", 0.05))
    if run.has("comparisons"):
        effs = F.ranked(F.effects(run.tables["comparisons"]))
        for e in effs[:MAX_HEADLINES]:
            items.append(f"<li><strong>{escape(e.claim(run.reference_cohort))}</strong>; "
                         f"{escape(e.evidence(q, full_note=False))}</li>")
        if len(effs) > MAX_HEADLINES:
            items.append(f"<li>{len(effs) - MAX_HEADLINES} further model effects are in the "
                         f"forest plot and in the appendix table models/comparisons.csv.</li>")
    else:
        items.append("<li>No model results: models/comparisons.csv was not written, so "
                     "there are no headline comparisons.</li>")
    for c in charts:
        if c.figure.from_model:
            continue
        items.append(f"<li>{escape(c.figure.finding)} <span class=\"detail\">("
                     f"{escape(c.figure.detail)})</span></li>")
    return items


def figure_html(c: ChartFiles) -> str:
    f = c.figure
    name = escape(f.name)
    rel = {k: escape(f"charts/{getattr(c, k).name}") for k in ("png", "svg", "html")}
    return f"""
<figure id="fig-{name}">
<h3>{escape(f.finding)}</h3>
<p class="detail">{escape(f.detail)}</p>
<div class="chart" id="chart-{name}" data-spec="spec-{name}" role="img"
     aria-label="{escape(f.finding)}"></div>
<figcaption>{escape(f.caption)} {escape(f.method)}</figcaption>
<p class="files">Files: <a href="{rel['png']}">PNG</a> · <a href="{rel['svg']}">SVG</a> ·
<a href="{rel['html']}">HTML</a></p>
</figure>"""


def _qc_section(run: RunFiles) -> str:
    ok, total = run.manifest.get("sessions_ok"), run.manifest.get("sessions_total")
    parts = []
    if ok is not None and total is not None:
        parts.append(f"<p>{escape(str(ok))} of {escape(str(total))} sessions were processed "
                     "without error.</p>")
    summary = run.manifest.get("summary") or []
    if summary:
        parts.append("<p>What the run reported:</p><ul>" +
                     "".join(f"<li>{escape(str(s))}</li>" for s in summary) + "</ul>")
    if run.has("qc"):
        qc = run.tables["qc"]
        parts.append(f"<p>Per-session checks (qc/sessions.csv, {len(qc)} sessions):</p>")
        parts.append(table_html(qc))
    else:
        parts.append(f"<p class=\"note\">{escape(run.missing.get('qc', 'qc/sessions.csv is empty'))}"
                     "</p>")
    return "\n".join(parts)


def _agreement_section(run: RunFiles) -> str:
    if not run.has("agreement"):
        return ""
    ag = run.tables["agreement"]
    med = pd.to_numeric(ag["kappa_attended"], errors="coerce").median()
    text = (f"<p>{len(ag)} double-coded session pair(s) were compared; median Cohen's κ for "
            f"the attended platform {escape(fmt.num(med))}, median switch F1 "
            f"{escape(fmt.num(pd.to_numeric(ag['switch_f1'], errors='coerce').median()))}.</p>")
    return ('<section id="agreement"><h2>Coder agreement</h2>' + text +
            table_html(ag) + "</section>")


def _appendix(run: RunFiles) -> str:
    out = []
    for name, rel in TABLE_PATHS.items():
        if name not in run.tables:
            out.append(f"<li>{escape(rel)}: {escape(run.missing.get(name, 'not written'))}</li>")
            continue
        df = run.tables[name]
        if len(df) > MAX_APPENDIX_ROWS:
            out.append(f"<li>{escape(rel)}: {len(df):,} rows (one per event), too many to "
                       "print here; open the CSV file in the run folder.</li>")
            continue
        out.append(f"<li><details><summary>{escape(rel)} ({len(df):,} rows)</summary>"
                   f"{table_html(df)}</details></li>")
    return "<ul class=\"appendix\">" + "".join(out) + "</ul>"


def render_report(run: RunFiles, charts: list[ChartFiles], omitted: dict[str, str],
                  methods: Methods, bundle: str) -> str:
    """The whole page as one string."""
    study = escape(run.study_name)
    n_part = run.tables["sessions"]["participant_id"].nunique()
    n_sess = len(run.tables["sessions"])
    hours = pd.to_numeric(run.tables["sessions"]["coded_hours"], errors="coerce").sum()
    omitted_html = ""
    if omitted:
        omitted_html = ("<h3>Charts left out</h3><ul class=\"omitted\">" + "".join(
            f"<li><strong>{escape(CHARTS[k][0])}</strong>: {escape(v)}.</li>"
            for k, v in omitted.items()) + "</ul>")
    methods_html = "".join(f"<h3>{escape(h)}</h3><p>{escape(t)}</p>" for h, t in methods.sections)
    refs_html = "<ol class=\"refs\">" + "".join(f"<li>{escape(r)}</li>"
                                                 for r in methods.references) + "</ol>"
    specs = "\n".join(
        f'<script type="application/json" id="spec-{escape(c.figure.name)}">'
        f"{script_json(c.spec)}</script>" for c in charts)
    privacy = "".join(f"<li>{escape(p)}</li>" for p in PRIVACY)
    return f"""<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{csp(bundle, EMBED_JS)}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="screenweave {escape(__version__)}">
<title>{study} — findings</title>
<style>{STYLE}</style>
</head>
<body>
<main>
<header>
<h1>{study}</h1>
<p class="meta">Findings report · {n_part} participants, {n_sess} sessions, {escape(fmt.auto(hours))}
coded hours · built {escape(_when(run))} by screenweave {escape(__version__)} from the run's own
files.</p>
</header>
<nav><ol>
<li><a href="#headline">Headline findings</a></li><li><a href="#figures">Figures</a></li>
<li><a href="#methods">Methods</a></li><li><a href="#qc">Quality control</a></li>
{'<li><a href="#agreement">Coder agreement</a></li>' if run.has("agreement") else ''}
<li><a href="#privacy">Personal data</a></li><li><a href="#appendix">Appendix: tables</a></li>
</ol></nav>
<section id="headline"><h2>Headline findings</h2>
<ul class="headline">{''.join(headline_items(run, charts))}</ul>
</section>
<section id="figures"><h2>Figures</h2>
<noscript><p class="note">The charts are drawn by JavaScript embedded in this page; with
scripts off, open the PNG or SVG files of the charts/ folder linked under each figure.</p></noscript>
{''.join(figure_html(c) for c in charts)}
{omitted_html}
</section>
<section id="methods"><h2>Methods</h2>
{methods_html}
<h3>References</h3>
{refs_html}
</section>
<section id="qc"><h2>Quality control</h2>
{_qc_section(run)}
</section>
{_agreement_section(run)}
<section id="privacy"><h2>Personal data</h2>
<div class="caution"><ul>{privacy}</ul></div>
</section>
<section id="appendix"><h2>Appendix: tables</h2>
<p>The run's tables as written, rounded to four significant digits for reading (the CSV
files keep full precision).</p>
{_appendix(run)}
</section>
</main>
<script>{bundle}</script>
{specs}
<script>{EMBED_JS}</script>
</body>
</html>
"""

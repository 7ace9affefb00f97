"""The methods section, generated from the resolved configuration and the methods run.

Nothing here is boilerplate typed once: every threshold is read from the run's
resolved configuration (manifest ``config``) and every published method from the
manifest's ``methods`` (stage -> {method key: reference}), so the text changes when
the analysis does. References are numbered in order of first mention.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

from pipeline.report import numbers as fmt
from pipeline.report.charts._common import STUDENT
from pipeline.report.charts.agreement import COHEN, LANDIS_KOCH
from pipeline.report.charts.dwell import KM_REFERENCE
from pipeline.report.charts.power import COHEN_1988
from pipeline.report.palette import OKABE_ITO
from pipeline.report.run_files import RunFiles

OKABE_ITO_REF = ("Okabe, M. & Ito, K. (2008). Color Universal Design (CUD): how to make "
                 "figures and presentations that are friendly to colorblind people. "
                 "J*FLY Data Depository.")

#: Readable names of pipeline stages in the manifest's ``methods``.
STAGE_NAMES = {"ingest": "Ingest", "signals": "Signal processing", "eda": "Skin conductance",
               "hr": "Heart rate", "align": "Alignment", "arousal": "Arousal",
               "metrics": "Metrics", "switching": "Switching", "dwell": "Dwell time",
               "models": "Group models", "qc": "Quality control", "agreement": "Coder agreement",
               "power": "Power analysis", "survey": "Survey"}


@dataclass
class Methods:
    sections: list[tuple[str, str]] = field(default_factory=list)
    references: list[str] = field(default_factory=list)

    def cite(self, ref: str) -> str:
        """Number of ``ref`` as ``[n]``, adding it on first use."""
        ref = ref.strip()
        if ref not in self.references:
            self.references.append(ref)
        return f"[{self.references.index(ref) + 1}]"

    def add(self, heading: str, text: str) -> None:
        self.sections.append((heading, text))


_YEAR = re.compile(r"\b(1[89]\d\d|20\d\d)\b")


def _stage_methods(m: Methods, run: RunFiles, stage: str) -> str:
    """' Methods used: ...' for one stage of the manifest's ``methods``.

    An entry whose text cites a publication (it has a year) becomes a numbered
    reference; a bare method key (e.g. ``eda_lowpass: butterworth``) is named inline.
    """
    used = run.methods.get(stage) or {}
    if not used:
        return ""
    bits = []
    for key, text in used.items():
        name = key.replace("_", " ")
        text = text.strip()
        if _YEAR.search(text):
            bits.append(f"{name} {m.cite(f'{name}: {text}')}")
        elif text:
            bits.append(f"{name}: {text.replace(',', ', ').replace('_', ' ')}")
        else:
            bits.append(name)
    return " Methods used: " + "; ".join(bits) + "."


def build_methods(run: RunFiles, figure_refs: list[str] = ()) -> Methods:
    """All methods paragraphs and the numbered reference list for this run."""
    c = run.config
    m = Methods()
    vocab = run.platform_groups
    groups = list(dict.fromkeys(vocab.values()))
    declared = bool((c.get("platforms") or {}).get("groups"))
    coding = c.get("coding") or {}
    primary = coding.get("primary_coder")
    m.add("Coding", (
        "Media use was coded second by second on the video clock: for each second, the "
        "platforms in the participant's field of view and the one platform attended. "
        + (f"The platform vocabulary was declared in the configuration: {len(vocab)} platforms "
           f"in {len(groups)} groups ({', '.join(groups)}). " if declared else
           f"No vocabulary was declared, so every code seen was accepted "
           f"({len(vocab)} platforms). ")
        + ("Where a session had several coders, the codes of "
           + (f"coder {primary!r}" if primary else "the first coder in sorted order")
           + " were analysed. ")
        + "Seconds missing from the media log are uncoded: excluded from every metric and "
          "reported as coverage gaps, never filled."
        + _stage_methods(m, run, "ingest")))

    sw = c.get("switching") or {}
    m.add("Media states and switching", (
        "Each coded second is in one of three states: none (nothing in view), single (one "
        "platform) or multi (two or more). An attention bout is a maximal run of seconds "
        f"with the same attended platform; bouts shorter than {sw.get('min_bout_s', 1)} s "
        "were dropped and equal neighbours merged. A switch is a bout on one platform "
        f"followed by a bout on another with at most {sw.get('max_gap_s', 3)} unattended "
        "seconds between them. The switch rate is switches per hour of multi-platform "
        f"time; sessions with less than {fmt.short(sw.get('min_multi_minutes', 5))} minutes "
        "of multi-platform time have no rate and are left out of the switch-rate models."
        + _stage_methods(m, run, "switching") + _stage_methods(m, run, "metrics")))

    dw = c.get("dwell") or {}
    km = KM_REFERENCE
    m.add("Dwell time", (
        "Dwell time is the length of an attention bout. Bouts cut by a session edge or an "
        "uncoded gap"
        + (" or bordering invalid signal" if dw.get("censor_at_invalid_signal", True) else "")
        + " are right-censored, and dwell distributions and medians are Kaplan–Meier "
          f"estimates {m.cite(km)}."
        + _stage_methods(m, run, "dwell")))

    eda = (c.get("signals") or {}).get("eda") or {}
    m.add("Skin conductance", (
        f"Skin conductance at or below {fmt.short(eda.get('min_us', 0.0))} µS or above "
        f"{fmt.short(eda.get('max_us', 100.0))} µS was marked invalid, with the "
        f"configured artifact rules; a video second is valid when at least "
        f"{fmt.pct(eda.get('min_valid_share', 0.5))} of its samples are. Sensor time was "
        "mapped to video time by the sync events of each session (offset from one pair, "
        "offset and linear drift from two or more, least squares); sessions without sync "
        "events were aligned at zero and flagged."
        + _stage_methods(m, run, "signals") + _stage_methods(m, run, "eda")
        + _stage_methods(m, run, "hr") + _stage_methods(m, run, "align")))

    ar = c.get("arousal") or {}
    source = "phasic component of skin conductance" if ar.get("source") == "phasic" \
        else "cleaned skin conductance"
    m.add("Arousal", (
        f"Arousal is the within-participant z-score of the 1 Hz mean of the {source}, "
        "over all of that participant's valid seconds in all sessions. Peak and trough are "
        "the 95th and 5th percentiles of arousal over a state's valid seconds and range is "
        "their difference, computed where the state has at least "
        f"{fmt.short(ar.get('min_state_minutes', 10))} valid minutes; the compression ratio "
        "is range(multi) / range(single)." + _stage_methods(m, run, "arousal")))

    qc = c.get("qc") or {}
    m.add("Quality control", (
        f"Sessions in which less than {fmt.pct(qc.get('min_usable_share', 0.5))} of the coded "
        "seconds have valid signal were flagged"
        + (" and left out of the models." if qc.get("exclude_flagged_from_models", True)
           else "; they were kept in the models.")
        + _stage_methods(m, run, "qc")))

    mo = c.get("models") or {}
    covs = mo.get("covariates") or []
    m.add("Group models", (
        f"Cohorts were compared with the reference cohort {run.reference_cohort!r}"
        + (f", adjusting for {', '.join(covs)}" if covs else "")
        + ". Estimates on the log scale are reported as ratios (exp of the estimate and of "
          "its confidence limits). p-values were adjusted for the false discovery rate "
          f"(Benjamini–Hochberg, q = {mo.get('fdr_q', 0.05):g})."
        + _stage_methods(m, run, "models") + _stage_methods(m, run, "survey")))

    if run.has("switch_locked"):
        window = mo.get("switch_locked_window_s")
        pseudo = mo.get("switch_locked_pseudo")
        pre = mo.get("switch_locked_pre_s")
        m.add("Switch-locked arousal", (
            "Arousal was traced "
            + (f"{window} s either side of each switch" if window else "around each switch")
            + " and, as the baseline, around "
            + (f"{pseudo} pseudo-switches" if pseudo else "pseudo-switches")
            + " placed at random in each session's multi-platform time; trajectories were "
              "averaged within participants first. "
            + (f"Whether arousal rises or falls over the {pre} s before a switch was tested on "
               "the slope of the switch minus pseudo-switch trajectory across participants."
               if pre else "")
            + _stage_methods(m, run, "switch_locked")))
    if run.has("agreement"):
        tol = (c.get("agreement") or {}).get("switch_tolerance_s", 2)
        m.add("Coder agreement", (
            "Double-coded sessions were compared second by second: Cohen's κ for the "
            "attended platform (each platform and none) and for the media state, and "
            "precision, recall and F1 of the second coder's switches matched one-to-one "
            f"to the reference coder's within {tol} s with the same platforms. κ follows "
            f"Cohen {m.cite(COHEN)}; the chart marks the 0.61 and 0.81 bounds of "
            f"'substantial' and 'almost perfect' agreement of Landis and Koch "
            f"{m.cite(LANDIS_KOCH)}."
            + _stage_methods(m, run, "agreement")))
    if run.has("power"):
        m.add("Power analysis", (
            "Power for the cohort effect on the switch rate was estimated by simulation "
            "(`screenweave power`) for each number of participants per cohort in "
            "power/power.csv, with a 95% interval of each estimate; the chart marks the "
            f"conventional 80% target {m.cite(COHEN_1988)}." + _stage_methods(m, run, "power")))

    known = {"ingest", "switching", "metrics", "dwell", "signals", "eda", "hr", "align",
             "arousal", "qc", "models", "survey", "agreement", "power", "switch_locked"}
    for stage in run.methods:
        if stage not in known:
            text = _stage_methods(m, run, stage).strip()
            if text:
                m.add(STAGE_NAMES.get(stage, stage.replace("_", " ").capitalize()), text)

    names = ", ".join(n for n, _ in OKABE_ITO[:4])
    student = next((r for r in figure_refs if r.startswith("Student")), STUDENT)
    m.add("Charts", (
        "Colour stands for platform only, with the same colour for a platform in every chart, "
        f"from the colour-blind-safe set of Okabe and Ito {m.cite(OKABE_ITO_REF)} ({names}, "
        "...); cohorts are told apart by position, panel or grey level. Confidence intervals of "
        f"means across participants are Student-t intervals {m.cite(student)}."))
    return m

"""Methods text for the report, generated from the methods that actually ran.

``SessionSignals.methods`` maps a step to the registry key that ran
(``eda_decomposition = "highpass"`` ...); :func:`describe_methods` turns the union
over sessions into sentences with their references.
"""

from __future__ import annotations

KLECKNER = ("Kleckner et al. (2018), Simple, transparent, and flexible automated "
            "quality assessment procedures for ambulatory electrodermal activity data, "
            "IEEE Trans Biomed Eng 65:1460-1467")
BOUCSEIN = ("Boucsein et al. (2012), Publication recommendations for electrodermal "
            "measurements, Psychophysiology 49:1017-1034")
BRAITHWAITE = ("Braithwaite et al. (2013), A guide for analysing electrodermal activity "
               "(EDA) & skin conductance responses (SCRs) for psychological experiments")
GRECO = ("Greco et al. (2016), cvxEDA: a convex optimization approach to electrodermal "
         "activity processing, IEEE Trans Biomed Eng 63:797-804")
MALIK = ("Malik et al. (1989), Eur Heart J 10:1060-1074; Task Force of the ESC and NASPE "
         "(1996), Eur Heart J 17:354-381")
BERNTSON = ("Berntson et al. (1990), An approach to artifact identification: application "
            "to heart period data, Psychophysiology 27:586-598")

RULE_TEXT = {
    "out_of_range": "values outside the plausible range (Kleckner et al. 2018, rule 1)",
    "jump": "changes faster than the slope limit (Kleckner et al. 2018, rule 2)",
    "flat_line": "flat lines of a sensor that is off",
    "clipping": "readings held at the sensor's ceiling",
    "motion": "stretches of strong accelerometer motion",
}

TEXT: dict[tuple[str, str], tuple[str, str]] = {
    ("eda_lowpass", "butterworth"): (
        "Skin conductance was low-pass filtered with a zero-phase Butterworth filter.",
        "Makowski et al. (2021), NeuroKit2, Behav Res Methods 53:1689-1696"),
    ("eda_decomposition", "highpass"): (
        "The phasic component was obtained with a 0.05 Hz zero-phase high-pass filter, "
        "the tonic component being the remainder.", BRAITHWAITE),
    ("eda_decomposition", "convex"): (
        "Tonic and phasic components were estimated by convex optimisation (a sparse "
        "non-negative driver through a Bateman impulse response plus a spline tonic "
        "level), in overlapping windows.", GRECO),
    ("scr_scoring", "trough_to_peak"): (
        "SCRs were scored trough to peak, with the minimum amplitude for computer "
        "scoring; rise and half-recovery times were measured on the cleaned signal.",
        BOUCSEIN),
    ("hr_artifacts", "malik"): (
        "Inter-beat intervals differing by more than 20 % from their neighbours were "
        "excluded.", MALIK),
    ("hr_artifacts", "berntson"): (
        "Inter-beat intervals were screened with the criterion beat difference of "
        "Berntson et al.", BERNTSON),
}


def describe_methods(methods: dict[str, str]) -> list[str]:
    """Readable sentences, each ending with its reference, for the methods that ran.

    ``methods`` is one session's ``SessionSignals.methods`` or the union over sessions
    (values may then list several keys joined by ``;``).
    """
    lines: list[str] = []
    rules = methods.get("eda_artifact_rules")
    if rules:
        names = sorted({r for part in rules.split(";") for r in part.split(",") if r})
        parts = [RULE_TEXT.get(r, r) for r in names]
        lines.append("Skin conductance samples were marked invalid for " + "; ".join(parts)
                     + "; stretches no longer than max_interp_s were bridged, longer ones "
                     f"padded and masked ({KLECKNER}, rule 4).")
    for step in ("eda_lowpass", "eda_decomposition", "scr_scoring", "hr_artifacts"):
        value = methods.get(step)
        if not value:
            continue
        for key in sorted(set(value.split(";"))):
            text = TEXT.get((step, key))
            if text:
                lines.append(f"{text[0]} ({text[1]})")
    return lines

"""Synthetic in-home media multitasking studies with known truth.

``generate_study(out_dir, SynthOptions(...))`` writes a study folder in the study
data contract's format plus a ``truth/`` folder with what was really generated;
``simulate_session_codes`` simulates one session's media codes of a cohort (used by
the power analysis). The demo study in ``synthetic_diaries/demo/`` was made with it.
"""

from synthetic_diaries.codes import simulate_session_codes
from synthetic_diaries.generator import generate_study
from synthetic_diaries.options import CohortBehaviour, SynthOptions, load_options

__all__ = ["CohortBehaviour", "SynthOptions", "generate_study", "load_options",
           "simulate_session_codes"]

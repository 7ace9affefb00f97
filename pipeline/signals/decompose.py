"""Tonic/phasic decomposition of cleaned skin conductance, one function per method.

Every method takes the gap-free cleaned series at the analysis rate and returns the
tonic and phasic components (µS) on the same samples.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from pipeline.config import DecompositionSettings
from pipeline.errors import choose
from pipeline.signals.convex import decompose_convex
from pipeline.signals.filters import butterworth, context_samples, filtfilt_blocks


@dataclass
class Decomposition:
    tonic: np.ndarray
    phasic: np.ndarray
    notes: list[str]


DecomposeFn = Callable[[np.ndarray, float, DecompositionSettings], Decomposition]


def phasic_by_highpass(c: np.ndarray, fs: float, cfg: DecompositionSettings) -> Decomposition:
    """Phasic component by a zero-phase Butterworth high-pass at ``highpass_hz``; the
    tonic component is the rest.

    References
    ----------
    Braithwaite, J. J., Watson, D. G., Jones, R., & Rowe, M. (2013). A guide for
    analysing electrodermal activity (EDA) & skin conductance responses (SCRs) for
    psychological experiments. Technical report, University of Birmingham (0.05 Hz
    high-pass).
    """
    fc = min(cfg.highpass_hz, 0.4 * fs)
    sos = butterworth(cfg.highpass_order, fc, fs, "highpass")
    phasic = filtfilt_blocks(sos, c, context_samples(fc, fs))
    tonic = c - phasic
    return Decomposition(tonic, phasic, [])


def decomposition_by_convex_optimisation(c: np.ndarray, fs: float,
                                         cfg: DecompositionSettings) -> Decomposition:
    """Tonic spline plus a sparse non-negative driver through a Bateman response,
    by convex optimisation, in overlapping windows.

    References
    ----------
    Greco, A., Valenza, G., Lanata, A., Scilingo, E. P., & Citi, L. (2016). cvxEDA: a
    convex optimization approach to electrodermal activity processing. IEEE
    Transactions on Biomedical Engineering 63(4), 797-804.
    """
    tonic, phasic, ok = decompose_convex(c, fs, cfg.convex)
    notes = [] if ok else ["convex decomposition: a window stopped at max_iterations "
                           "before converging"]
    return Decomposition(tonic, phasic, notes)


DECOMPOSITION_METHODS: dict[str, DecomposeFn] = {
    "highpass": phasic_by_highpass,                      # fast default; Braithwaite 2013
    "convex": decomposition_by_convex_optimisation,      # Greco et al. 2016
}


def decomposition_method(name: str) -> DecomposeFn:
    return choose(DECOMPOSITION_METHODS, name, "decomposition method", " in [signals.decomposition]")


def decompose(c: np.ndarray, fs: float, cfg: DecompositionSettings) -> Decomposition:
    """Split cleaned skin conductance into tonic and phasic components (``cfg.method``)."""
    return decomposition_method(cfg.method)(c, fs, cfg)

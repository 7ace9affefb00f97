"""metrics stage: from one session's per-second timeline to its metric rows.

* :mod:`~pipeline.metrics.states` - none / single / multi state of each second
* :mod:`~pipeline.metrics.switching` - attention bouts and switches
* :mod:`~pipeline.metrics.dwell` - Kaplan–Meier dwell-time curve and median
* :mod:`~pipeline.metrics.budget` - time budget per platform and platform group
* :mod:`~pipeline.metrics.arousal` - within-participant arousal, per-state summaries
* :mod:`~pipeline.metrics.session` - :func:`session_metrics`, assembling all of these
"""

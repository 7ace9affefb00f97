"""Agreement between coders of the same session: kappa, alpha and switch events.

* :mod:`~pipeline.agreement.kappa` - percent agreement, Cohen's kappa, Landis & Koch bands
* :mod:`~pipeline.agreement.alpha` - Krippendorff's alpha (nominal, any number of coders)
* :mod:`~pipeline.agreement.events` - one-to-one matching of two coders' switches
* :mod:`~pipeline.agreement.session` - one session's rows of the agreement tables
"""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from pipeline.errors import ConfigError
from pipeline.models.fdr import adjust_p

# Benjamini & Hochberg (1995), J R Stat Soc B 57:289-300, worked example of 15 p-values
# (as reproduced in reference test suites).
BH_1995 = np.array([.0001, .0004, .0019, .0095, .0201, .0278, .0298, .0344, .0459,
                    .3240, .4262, .5719, .6528, .7590, 1.0])


def test_bh_rejects_four_of_the_published_fifteen_at_q_005():
    # Benjamini & Hochberg (1995): at q = 0.05 the procedure rejects 4 hypotheses
    # (Bonferroni and Holm reject 3).
    adjusted = adjust_p(BH_1995, "bh")
    assert int((adjusted <= 0.05).sum()) == 4
    assert np.all(adjusted[:4] <= 0.05) and np.all(adjusted[4:] > 0.05)
    # Bonferroni on the same p-values rejects 3 (same source)
    assert int((BH_1995 * len(BH_1995) <= 0.05).sum()) == 3


def test_bh_and_by_match_statsmodels_reference():
    # reference library: statsmodels.stats.multitest.multipletests (fdr_bh, fdr_by)
    rng = np.random.default_rng(3)
    p = np.concatenate([rng.uniform(size=30), rng.uniform(0, 0.01, size=10)])
    rng.shuffle(p)
    for ours, theirs in (("bh", "fdr_bh"), ("by", "fdr_by")):
        np.testing.assert_allclose(adjust_p(p, ours),
                                   multipletests(p, method=theirs)[1], rtol=1e-12)


def test_nan_p_values_are_left_out_of_the_family():
    p = np.array([0.01, np.nan, 0.04])
    out = adjust_p(p, "bh")
    assert np.isnan(out[1])
    np.testing.assert_allclose(out[[0, 2]], multipletests([0.01, 0.04], method="fdr_bh")[1])


def test_unknown_method_lists_choices():
    with pytest.raises(ConfigError) as err:
        adjust_p(BH_1995, "bonferoni")
    assert "bh" in err.value.hint and "by" in err.value.hint

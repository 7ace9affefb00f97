"""The study-level agreement helpers."""

from __future__ import annotations

import pandas as pd
import pytest

from pipeline.agreement.tables import check_reserved_code
from pipeline.errors import InputError


@pytest.mark.parametrize("categorical", [False, True])
def test_a_platform_code_named_like_nothing_attended_is_refused(categorical):
    # 'none' is the agreement tables' own name for "nothing attended"
    # (pipeline.agreement.session.NONE), so no platform may be called that.
    log = pd.DataFrame({"attended": ["tv", "none", ""]})
    if categorical:
        log["attended"] = log["attended"].astype("category")
    with pytest.raises(InputError) as err:
        check_reserved_code(log)
    assert "none" in str(err.value) and "attended" in str(err.value)


def test_ordinary_codes_and_empty_cells_pass():
    check_reserved_code(pd.DataFrame({"attended": pd.Categorical(["tv", "", "phone"])}))
    check_reserved_code(pd.DataFrame({"attended": ["tv", "", "phone"]}))

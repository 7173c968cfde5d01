import numpy as np
import pandas as pd
import pytest

from fleet import demand
from fleet.errors import InputError
from fleet.profiles import HOUR_COLUMNS, read_tier_profiles


def _row(tier, month="", day_type="", base=10.0, evening=60.0):
    vals = {c: (evening if 18 <= k < 23 else base) for k, c in enumerate(HOUR_COLUMNS)}
    return {"tier": tier, "month": month, "day_type": day_type, **vals}


def test_a_survey_profile_replaces_the_tier_and_specific_rows_win(tmp_path):
    f = tmp_path / "profiles.csv"
    pd.DataFrame([_row(2), _row(2, month=7, day_type="weekend", evening=100.0)]).to_csv(f, index=False)
    prof = read_tier_profiles(f)
    assert prof[2].shape == (12, 2, 24)
    assert prof[2][6, 1, 19] == 100.0 and prof[2][6, 0, 19] == 60.0 and prof[2][0, 1, 19] == 60.0
    settings = demand.DemandSettings(tier_profiles=prof)
    year, peak = demand.member_year_w("t2", np.zeros((365, 24)), settings)
    assert year.sum(axis=1).max() == pytest.approx(19 * 10 + 5 * 100)
    assert peak == 100.0


def test_profile_problems_name_row_and_column(tmp_path):
    f = tmp_path / "profiles.csv"
    rows = [_row(7), _row(1, month=13), _row(1, day_type="holiday"), {**_row(1), "h05": "-3"}]
    pd.DataFrame(rows).to_csv(f, index=False)
    with pytest.raises(InputError) as exc:
        read_tier_profiles(f)
    msgs = [str(p) for p in exc.value.problems]
    assert any("row 2" in m and "'tier'" in m for m in msgs)
    assert any("row 3" in m and "'month'" in m for m in msgs)
    assert any("row 4" in m and "'day_type'" in m for m in msgs)
    assert any("row 5" in m and "'h05'" in m for m in msgs)


def test_a_tier_must_cover_every_month(tmp_path):
    f = tmp_path / "p.csv"
    pd.DataFrame([_row(3, month=m) for m in range(1, 12)]).to_csv(f, index=False)
    with pytest.raises(InputError, match=r"month\(s\) \[12\]"):
        read_tier_profiles(f)

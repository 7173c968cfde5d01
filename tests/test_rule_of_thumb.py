import numpy as np
import pandas as pd
import pytest

from fleet import rule_of_thumb as rot


def test_worksheet_sizing_by_hand():
    # source: Sandia (1995) SAND87-7023 sizing worksheet (from memory): array = daily load /
    # (design-month peak sun hours x derate); battery = daily load x days of autonomy / allowed DoD.
    # Hand calculation: 500 Wh/day, 4.5 sun hours, derate 0.75 -> 148.1 Wp; 3 days -> 1500 Wh usable,
    # 3000 Wh nominal at 50 % depth of discharge
    assert rot.array_wp(500.0, 4.5, 0.75) == pytest.approx(500.0 / 3.375)
    assert rot.battery_usable_wh(500.0, 3.0) == pytest.approx(1500.0)
    assert rot.battery_usable_wh(500.0, 3.0) / 0.5 == pytest.approx(3000.0)
    assert rot.battery_usable_wh(450.0, 2.0, 0.9) == pytest.approx(1000.0)


def test_design_month_is_the_month_with_least_sun():
    # by construction: 1 kW/m2 for 5 h a day all year, 3 h a day in February -> 3 kWh/m2/day
    days = np.repeat(np.arange(12), rot.DAYS_IN_MONTH)
    hours = np.where(days == 1, 3, 5)
    poa = np.zeros((1, 2, 365, 24))
    for d in range(365):
        poa[0, :, d, 10:10 + hours[d]] = 1000.0
    assert rot.design_month_sun_hours(poa.reshape(1, 2, 8760))[0] == pytest.approx(3.0)


def test_each_unit_gets_the_cheapest_option_meeting_the_rule_or_the_largest():
    kits = pd.DataFrame({"kit_id": ["small", "mid", "big"], "array_wp": [100.0, 200.0, 400.0],
                         "battery_usable_wh": [600.0, 1600.0, 3000.0]})
    units = pd.DataFrame({"unit_id": ["a", "b"], "daily_energy_wh": [400.0, 5000.0], "deferrable_wh_day": [0.0, 0.0]})
    ev = pd.DataFrame({"unit_id": ["a"] * 3 + ["b"] * 3, "site_id": "S", "scheme": "shs",
                       "kit_id": ["small", "mid", "big"] * 2, "blocks": 1,
                       "lifecycle_cost_usd": [100.0, 250.0, 500.0] * 2})
    out = rot.choose(ev, units, kits, pd.Series({"S": 4.0}))
    # unit a needs 400 / (4 x 0.75) = 133 Wp and 3 x 400 = 1200 Wh usable: "mid" is the cheapest that has both
    assert out.set_index("unit_id").kit_id.to_dict() == {"a": "mid", "b": "big"}
    assert out.set_index("unit_id").loc["a", "need_wp"] == pytest.approx(400 / 3.0)
    assert not out.set_index("unit_id").loc["b", "meets_rule"]

"""known_at: what a run at a pseudo-cutoff could have trained on (targets after it hidden)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from dyadcast.models.base import known_at


def test_targets_after_the_cutoff_are_hidden_and_later_rows_dropped():
    months = pd.date_range("2024-01-01", periods=5, freq="MS")
    frame = pd.DataFrame({"month": months, "target_1": [1.0, 2, 3, 4, np.nan], "target_2": [5.0, 6, 7, np.nan, np.nan]})
    past = known_at(frame, pd.Timestamp("2024-03-01"), horizon=2)
    assert list(past["month"]) == list(months[:3])
    # anchor Jan: targets Feb, Mar known; anchor Feb: Mar known, Apr not; anchor Mar: nothing known yet
    np.testing.assert_array_equal(past["target_1"].to_numpy(), [1.0, 2.0, np.nan])
    np.testing.assert_array_equal(past["target_2"].to_numpy(), [5.0, np.nan, np.nan])
    assert frame["target_2"].iloc[1] == 6.0  # the input is not changed

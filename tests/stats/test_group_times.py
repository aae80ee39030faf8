"""One group's observation times against the pooled median (auditor.stats.rates.group_times)."""

import pytest

from auditor.stats.rates import group_times


def test_group_times_by_hand():
    # Times 10, 20, 30, 40: median 25; quartiles 17.5 and 32.5 by linear interpolation between order
    # statistics (Hyndman and Fan 1996, type 7; by hand, from memory); with a pooled median of 30 the
    # threshold is 24, so 10 and 20 of the four lie below it.
    g = group_times([40.0, 10.0, 30.0, 20.0], 30.0)
    assert (g.n, g.median, g.lower_quartile, g.upper_quartile) == (4, 25.0, pytest.approx(17.5), pytest.approx(32.5))
    assert g.share_short == 0.5

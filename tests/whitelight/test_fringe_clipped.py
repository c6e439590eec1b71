"""A white-light fringe told from monochromatic light when over-exposure clips channels.

Sources: Snell's law at the prism table (a dense prism disperses more than most stones, so
the blue edge lies lowest, critline.photo.whitelight module notes); a clipped channel's onset
sits low (critline.photo.edges, clipped highlights).  Edge values invented.
"""

from __future__ import annotations

from critline.photo.edges import EdgeFit
from critline.photo.whitelight import fringe_light


def _fit(value, clipped, stat=0.0002):
    return EdgeFit(value, stat, "stone", 0.8, 0.002,
                   {"stat_uncertainty": stat, "channel_clipped": clipped})


def test_fringe_seen_when_red_and_green_are_clipped():
    # clipped red and green onsets sit low (their order broken), the unclipped blue edge well
    # below both: a white-light fringe (prism dispersion puts blue lowest, Snell's law)
    per = {"red": (_fit(1.4681, True),), "green": (_fit(1.4692, True),), "blue": (_fit(1.4650, False),)}
    assert fringe_light(per) == "white"
    # blue level with the clipped edges (as an unclipped channel would be in monochromatic
    # light, where the clipped ones are biased low): no fringe
    per_mono = dict(per, blue=(_fit(1.4690, False),))
    assert fringe_light(per_mono) == "unknown"
    # the same gap with blue also clipped and the order broken proves nothing
    per_all = dict(per, blue=(_fit(1.4650, True),))
    assert fringe_light(per_all) == "unknown"
    # blue below both but within two standard deviations of one of them: not enough
    per_noisy = dict(per, red=(_fit(1.4660, True, stat=0.0010),))
    assert fringe_light(per_noisy) == "unknown"


def test_falling_order_with_one_significant_step_is_a_fringe():
    # red above green above blue (the dense prism's order), red poorly measured (clipped):
    # the spread against red's uncertainty is not significant, the green-blue step is
    per = {"red": (_fit(1.4977, True, stat=0.0018),), "green": (_fit(1.4968, True, stat=0.0004),),
           "blue": (_fit(1.4948, True, stat=0.0002),)}
    assert fringe_light(per) == "white"
    # the same channels rising towards blue (what clipping alone gives in monochromatic light,
    # the most clipped channel lowest) need the full significance of the spread
    rising = {"red": (_fit(1.4948, True, stat=0.0018),), "green": (_fit(1.4968, True, stat=0.0004),),
              "blue": (_fit(1.4977, True, stat=0.0002),)}
    assert fringe_light(rising) == "unknown"
    # no significant step: no fringe
    flat = {c: (_fit(v, True, stat=0.0010),) for c, v in (("red", 1.4977), ("green", 1.4968),
                                                          ("blue", 1.4955))}
    assert fringe_light(flat) == "unknown"

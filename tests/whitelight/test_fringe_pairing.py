"""White light: channel edges paired into one fringe, and a clipped channel's hidden share.

Sources: Snell's law at the prism table and the N-LASF31A Sellmeier formula (SCHOTT catalogue,
critline/synth/data/glasses.csv) bound the width of a coloured fringe (critline.photo.whitelight,
FRINGE_MAX); the Fresnel equations (Born and Wolf, Principles of Optics, 1.5) give the edge shape,
the same in every channel below the edge.  Edge values and levels invented.
"""

from __future__ import annotations

import numpy as np

from critline.optics import fresnel_reflectance
from critline.photo.edges import EdgeFit
from critline.photo.whitelight import (
    FRINGE_MAX,
    effective_wavelengths,
    hidden_ratio,
    prism_ratio,
    reread_edges,
)


def _fit(value, width=0.002, kind="stone", clipped=False):
    return EdgeFit(value, 0.0003, kind, 0.8, width, {"stat_uncertainty": 0.0003, "channel_clipped": clipped})


def test_fringe_bound_covers_a_dispersionless_stone():
    # a stone without dispersion at n = 1.80: its blue edge lies below its red edge by
    # n (1/ratio_blue - 1/ratio_red) (Snell's law); FRINGE_MAX must allow it
    lam = effective_wavelengths()
    spread = 1.80 / prism_ratio(lam["red"]) - 1.80 / prism_ratio(lam["blue"])
    assert 0.015 < spread < FRINGE_MAX


def test_channel_edges_too_far_apart_are_not_one_fringe():
    values = np.linspace(1.68, 1.82, 700)
    rgb = np.ones((3, values.size))
    lum = [_fit(1.7946, kind="liquid")]
    # paired by order, the channels' lower edges spread by 0.044 (more than any fringe) and
    # their upper edges lie on the luminance's liquid edge: no channel reading of either
    per = {"red": (_fit(1.7571), _fit(1.7931)), "green": (_fit(1.7323), _fit(1.7948)),
           "blue": (_fit(1.7135), _fit(1.7965))}
    out = reread_edges(lum, values, rgb, per_channel=per)
    assert [e.kind for e in out] == ["liquid"]
    # a genuine fringe (blue 0.008 below red, as the dense prism gives) is read by the channels
    per = {"red": (_fit(1.7460),), "green": (_fit(1.7440),), "blue": (_fit(1.7380),)}
    out = reread_edges([_fit(1.7445)] + lum, values, rgb, per_channel=per)
    stones = [e for e in out if e.kind == "stone"]
    assert len(stones) == 1 and stones[0].figures["white_light_method"] == "channel_cauchy"


def test_hidden_ratio_of_a_clipped_channel():
    # the same Fresnel edge (n = 1.54, prism 1.88) in two channels, the second 1.6 times
    # brighter and clipped at 1: the clip hides its bright level by the factor 1.6
    values = np.linspace(1.45, 1.60, 1500)
    shape = 0.5 * np.add(*fresnel_reflectance(values, 1.54, 1.88))  # unpolarised
    ref = 0.7 * shape
    clipped = np.minimum(1.6 * shape, 1.0)
    fits = {"blue": _fit(1.54), "red": _fit(1.537, clipped=True)}
    assert abs(hidden_ratio(values, clipped, ref, fits) - 1.6) < 0.05
    # an unclipped channel hides nothing
    assert abs(hidden_ratio(values, 0.9 * shape, ref, fits) - 1.0) < 0.01


def test_unknown_light_read_by_unclipped_channels():
    from critline.photo.whitelight import reread_unknown_light

    values = np.linspace(1.50, 1.60, 500)
    rgb = np.ones((3, values.size))
    lum = [_fit(1.5440)]
    # monochromatic light: every channel's onset at the same scale value; the channel reading
    # returns it at 589.3 nm (Snell's law with the N-LASF31A formula; 1e-5 from the Cauchy form)
    same = {c: (_fit(1.5440),) for c in ("red", "green", "blue")}
    (out,) = reread_unknown_light(lum, values, rgb, per_channel=same)
    assert abs(out.value - 1.5440) < 5e-5
    assert out.figures["white_light_method"] == "channel_cauchy_unknown_light"
    # a white-light fringe of a stone without dispersion: blue below red by n (1/r_b - 1/r_r)
    lam = effective_wavelengths()
    fringe = {c: (_fit(1.5440 / float(prism_ratio(lam[c]))),) for c in ("red", "green", "blue")}
    (out,) = reread_unknown_light([_fit(1.5420)], values, rgb, per_channel=fringe)
    assert abs(out.value - 1.5440) < 2e-4
    # two clipped channels: their onsets sit low, the luminance edge is kept as it is
    clipped = dict(same, red=(_fit(1.5400, clipped=True),), green=(_fit(1.5410, clipped=True),))
    (out,) = reread_unknown_light(lum, values, rgb, per_channel=clipped)
    assert out is lum[0]

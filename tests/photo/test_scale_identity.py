"""Identifying the graduations' values when a line lies on the shadow edge."""

from __future__ import annotations

import json

from critline.photo import read_photo
from critline.synth import random_scene, write_photo

# One instrument of the calibration bench's tuning setups (30004): a scale printed 0.0046 off
# with a 1 % gain error, seen in a 1.1 MP photo where the 1.65 graduation (a medium one) lies
# exactly on the shadow edge of a calcite reference (its ordinary
# ray, 1.6583 at 589.3 nm: from memory, as in calibration/references.csv).
SETUP = {'prism_glass': 'N-LASF31A', 'u_first': -0.7277695755414139, 'u_last': 0.6839385491611895,
         'spacing_change': -0.14475336194648925, 'spacing_bow': -0.012758792822819335,
         'axis_v': -0.0587520491084646, 'tick_side': -1, 'tick_lengths': (0.07, 0.11, 0.17),
         'tick_width': 0.009169342295154155, 'ink': 0.8725541759540248, 'labels': True,
         'label_height': 0.053006054880988265, 'spine': True, 'edge_blur': 0.0026207675858033108,
         'field_softness': 0.009128798686449358, 'liquid_ri': 1.803018699724287, 'liquid_abbe': 19.0,
         'scale_offset': 0.004646279132565683, 'scale_gain': -0.009635838194891904}


def test_a_line_on_the_shadow_edge_does_not_shift_the_values(tmp_path):
    # The edge's dark side continues the line's dark run along the edge, so the line measured
    # longer than the long graduations; with only a dozen lines in the bright part it set the
    # long/medium pattern's phase and every value came out 0.05 high.
    scene = random_scene(300082, stone_ris=(1.6583,), polariser="both", light="sodium",
                         liquid_line=0.0, **SETUP)
    path = tmp_path / "edge-on-line.jpg"
    write_photo(path, scene, 300082)
    truth = json.loads(path.with_suffix(".json").read_text())
    (true_edge,) = [e for e in truth["edges"] if e["kind"] == "stone"]
    reading = read_photo(path)
    assert reading.status == "ok"
    (edge,) = reading.stone_edges
    # the nominal printed-scale value, not the RI: the scale itself is 0.0046 off
    assert abs(edge.scale_position - true_edge["scale_position"]) < max(2 * edge.scale_uncertainty, 0.1)

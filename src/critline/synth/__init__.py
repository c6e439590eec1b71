"""Physics-based synthesizer of phone photos of a refractometer's eyepiece view, with ground truth.

``random_scene(seed)`` draws a scene across the photo envelope of the design;
``render(scene, seed)`` returns the RGB image and its ground-truth dict;
``write_photo(path, scene, seed)`` writes the image and a ``.json`` sidecar.
The ``view`` field of :class:`Scene` is ``'facet'`` (the shadow-edge view of a
flat facet) or ``'spot'`` (the distance view of a droplet on a curved stone,
:mod:`critline.synth.spot`: ``random_spot_scene``, ``write_spot_series``).
"""

from critline.synth.photo_io import encode, write_photo
from critline.synth.render import TRUTH_SCHEMA, ground_truth, render, scale_map
from critline.synth.scene import Scene, frame_size, random_scene
from critline.synth.spot import random_spot_scene, write_spot_series

__all__ = ["Scene", "TRUTH_SCHEMA", "encode", "frame_size", "ground_truth", "random_scene",
           "random_spot_scene", "render", "scale_map", "write_photo", "write_spot_series"]

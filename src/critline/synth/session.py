"""A stone's test session: one photo per rotation and polariser setting.

At each rotation the two readings are the semi-axes of the indicatrix section
perpendicular to the grazing direction (:func:`critline.core.indicatrix.section_indices`).
The polariser on the eyepiece passes one vibration direction (angle 0: parallel
to the table, 90: along the table's normal).  A ray whose vibration direction
makes angle ``phi`` with it keeps ``cos^2 phi`` of its light (Malus's law); the
two rays vibrate at right angles, so turning the polariser isolates each edge
in turn, as is common practice.  Without polariser each ray carries half the
light.

References
----------
Indicatrix sections: Born and Wolf, *Principles of Optics*, optics of
crystals; Malus's law (any optics text).  Practice of turning the stone and
taking readings with and without polariser: domain.md (common practice).
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from critline.core.indicatrix import grazing_direction, section_indices
from critline.fileio import atomic_write_text
from critline.synth.photo_io import write_photo
from critline.synth.scene import Scene

#: Edges carrying less than this share of the light are listed as faint, not as edges.
FAINT_WEIGHT = 0.1


def low_ray_vibration_deg(principal, facet_normal, azimuth_deg, orientation=None) -> float:
    """Angle of the low-index ray's vibration direction, degrees from the table plane (0..180).

    The two eigen-vibrations of the indicatrix section perpendicular to the
    grazing direction are perpendicular; the high ray's is this angle + 90.
    """
    n = np.asarray(principal, float)
    rot = np.eye(3) if orientation is None else np.asarray(orientation, float)
    normal = np.asarray(facet_normal, float) / np.linalg.norm(facet_normal)
    k = grazing_direction(normal, azimuth_deg)
    in_table = np.cross(k, normal)
    basis = np.stack([in_table, normal])            # (2, 3): the plane perpendicular to k
    block = basis @ (rot @ np.diag(1.0 / n**2) @ rot.T) @ basis.T
    _, vectors = np.linalg.eigh(block)                # ascending impermeability
    low_vec = vectors[:, 1]                           # larger impermeability -> lower index
    return float(np.degrees(np.arctan2(low_vec[1], low_vec[0])) % 180.0)


def ray_weights(principal, facet_normal, azimuth_deg, polariser_deg, orientation=None):
    """Share of light of the (low, high) ray passed by a polariser at ``polariser_deg`` (Malus's law).

    ``None``: no polariser (0.5 each).  Angle 0 passes vibrations parallel to
    the table, 90 along its normal.
    """
    if polariser_deg is None:
        return 0.5, 0.5
    phi = np.radians(polariser_deg - low_ray_vibration_deg(principal, facet_normal, azimuth_deg, orientation))
    return float(np.cos(phi) ** 2), float(np.sin(phi) ** 2)


def photo_name(rotation: float, polariser: float | None, suffix: str = ".jpg") -> str:
    pol = "none" if polariser is None else f"pol{int(round(polariser))}"
    return f"r{int(round(rotation)) % 360:03d}_{pol}{suffix}"


def session_scenes(principal, facet_normal, base: Scene, rotations: Sequence[float] = (0, 45, 90, 135),
                   polarisers: Sequence[float | None] = (0, 90, None), orientation=None,
                   vary=None, plan=None, polariser_mode: str = "isolate") -> list[tuple[str, Scene, dict]]:
    """Scenes of one session: ``(file name, scene, session facts)`` per photo.

    The photos are every rotation with every polariser setting, or the
    ``(rotation, polariser)`` pairs of ``plan``.  ``vary(index) -> dict`` may
    give per-photo overrides (the phone moves between shots); the stone,
    liquid, light and instrument stay those of ``base``.

    ``polariser_mode``: ``'isolate'`` (common practice: at each position the
    polariser is turned until one edge vanishes; setting 0 is the angle that
    passes the low ray only, 90 the high ray only) or ``'fixed'`` (the
    polariser stays at 0 or 90 degrees from the table plane and each ray passes
    by Malus's law, so both edges may show).
    """
    if polariser_mode not in ("isolate", "fixed"):
        raise ValueError("polariser_mode is 'isolate' or 'fixed'")
    if plan is None:
        plan = [(rot, pol) for rot in rotations for pol in polarisers]
    out = []
    for i, (rot, pol) in enumerate(plan):
        low, high = section_indices(principal, facet_normal, rot, orientation)
        angle = pol
        if pol is not None and polariser_mode == "isolate":
            angle = (low_ray_vibration_deg(principal, facet_normal, rot, orientation) + pol) % 180.0
        w = ray_weights(principal, facet_normal, rot, angle, orientation)
        if abs(high - low) < 1e-9:
            ris, weights = (float(low),), (1.0,)
        else:
            ris, weights = (float(low), float(high)), w
        extra = vary(i) if vary else {}
        scene = dataclasses.replace(base, **extra, stone_ris=ris, ray_weights=weights,
                                    polariser="both")
        facts = {"rotation": float(rot), "polariser": pol, "polariser_mode": polariser_mode,
                 "polariser_angle": None if angle is None else round(float(angle), 3), "section": [float(low), float(high)],
                 "weights": [float(x) for x in w], "principal": [float(x) for x in principal],
                 "facet_normal": [float(x) for x in facet_normal]}
        out.append((photo_name(rot, pol), scene, facts))
    return out


def write_session(folder, principal, facet_normal, base: Scene, seed: int, *, rotations=(0, 45, 90, 135),
                  polarisers=(0, 90, None), orientation=None, vary=None, plan=None,
                  polariser_mode: str = "isolate", stone: dict | None = None,
                  overwrite: bool = True) -> list[Path]:
    """Render a session into ``folder``: one photo and one sidecar per rotation and polariser.

    The sidecar's truth gains a ``session`` entry (rotation, polariser, the
    section's two indices and the rays' weights) and ``stone`` facts if given.
    Edges with less than :data:`FAINT_WEIGHT` of the light move to
    ``faint_edges``: a reader is not expected to find them.
    """
    folder = Path(folder)
    written = []
    for i, (name, scene, facts) in enumerate(session_scenes(principal, facet_normal, base, rotations,
                                                            polarisers, orientation, vary, plan,
                                                            polariser_mode)):
        path = folder / name
        sidecar = write_photo(path, scene, seed + i, overwrite=overwrite).with_suffix(".json")
        truth = json.loads(sidecar.read_text(encoding="utf-8"))
        truth["session"] = facts
        if stone:
            truth["stone"] = stone
        faint = [e for e in truth["edges"] if e["kind"] == "stone" and e.get("weight", 1.0) < FAINT_WEIGHT]
        if faint:
            truth["edges"] = [e for e in truth["edges"] if e not in faint]
            truth["faint_edges"] = faint
            if not any(e["kind"] == "stone" for e in truth["edges"]) and truth["status"] == "ok":
                truth["status"] = "no_edge"
        atomic_write_text(sidecar, json.dumps(truth, separators=(",", ":")) + "\n")
        written.append(path)
    return written

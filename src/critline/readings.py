"""Typed results of reading one photo, and their ``critline.read/1`` JSON form.

These dataclasses are the contract between the photo reader (which makes
them), calibration (which maps scale positions to RI), batch/report (which
consume them) and the identification core (which only sees numbers taken
from them).  See ``shared/design.md`` of the project for the JSON contract.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

STATUSES = ("ok", "over_limit", "no_edge", "rejected")
LIGHTS = ("monochromatic", "white", "unknown")
MODES = ("graduations", "field_frame")
EDGE_KINDS = ("stone", "liquid", "spot")  # spot: a spot (distance) reading, critline.photo.spot


def _r4(x):
    return None if x is None or not math.isfinite(x) else round(float(x), 4)


@dataclass(frozen=True)
class Edge:
    """One shadow edge found in a photo.

    Attributes
    ----------
    ri : float
        Refractive index at 589.3 nm (nominal scale value or calibrated).
    uncertainty : float
        Standard uncertainty of ``ri`` (one sigma), never zero.
    kind : str
        ``"stone"`` or ``"liquid"``.
    scale_position : float
        Position of the onset of total reflection, in graduation units from
        the first graduation (what calibration maps to RI).
    scale_uncertainty : float
        Standard uncertainty of ``scale_position``, graduation units.
    contrast : float
        Brightness step across the edge relative to the bright side, 0..1.
    field_position : float or None
        Signed position of the edge along the scale axis, relative to the
        field circle: (distance from the field centre) / (field radius),
        positive toward higher values.  Used by the field-frame fallback.
    flags : tuple of str
        Per-edge flags (e.g. ``"extrapolated"``).
    """

    ri: float
    uncertainty: float
    kind: str
    scale_position: float
    scale_uncertainty: float
    contrast: float
    field_position: float | None = None
    flags: tuple[str, ...] = ()

    def to_json(self) -> dict:
        d = {
            "ri": _r4(self.ri),
            "uncertainty": _r4(max(self.uncertainty, 1e-4)),
            "kind": self.kind,
            "scale_position": None if not math.isfinite(self.scale_position) else round(self.scale_position, 3),
            "contrast": round(float(self.contrast), 3),
        }
        if self.flags:
            d["flags"] = list(self.flags)
        return d


@dataclass(frozen=True)
class Quality:
    """Quality figures of a reading and the flags that degrade it."""

    flags: tuple[str, ...] = ()
    figures: dict = field(default_factory=dict)

    def to_json(self) -> dict:
        out = {"flags": list(self.flags)}
        for k, v in sorted(self.figures.items()):
            if isinstance(v, float):
                v = round(v, 4) if math.isfinite(v) else None
            out[k] = v
        return out


@dataclass(frozen=True)
class PhotoReading:
    """Everything read from one photo."""

    photo: str
    sha256: str
    status: str
    reason: str | None = None
    edges: tuple[Edge, ...] = ()
    light: str = "unknown"
    mode: str = "graduations"
    quality: Quality = field(default_factory=Quality)
    #: brightness profile along the scale, for reports: (scale positions, brightness 0..1)
    profile: tuple[tuple[float, ...], tuple[float, ...]] | None = None
    #: field circle in photo pixels (cx, cy, r), as found
    field_circle: tuple[float, float, float] | None = None

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"unknown status {self.status!r}")

    @property
    def stone_edges(self) -> tuple[Edge, ...]:
        return tuple(e for e in self.edges if e.kind == "stone")

    def to_json(self, include_profile: bool = False) -> dict:
        d = {
            "photo": self.photo,
            "sha256": self.sha256,
            "status": self.status,
            "reason": self.reason,
            "edges": [e.to_json() for e in sorted(self.edges, key=lambda e: e.ri)],
            "light": self.light,
            "mode": self.mode,
            "quality": self.quality.to_json(),
        }
        if include_profile and self.profile is not None:
            d["profile"] = {"scale_position": [round(x, 3) for x in self.profile[0]],
                            "brightness": [round(y, 4) for y in self.profile[1]]}
        return d


def rejected(photo: str, sha256: str, reason: str) -> PhotoReading:
    """A photo that gave no reading, with the reason in one line."""
    return PhotoReading(photo=photo, sha256=sha256, status="rejected", reason=reason)

"""What one synthetic photo shows and how the phone took it: :class:`Scene` and :func:`random_scene`."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from critline.instrument import DEFAULT, Instrument

#: 'facet': shadow edge of a flat facet across the field; 'spot': the distance (spot) view of a
#: droplet under a curved stone (:mod:`critline.synth.spot`)
VIEWS = ("facet", "spot")
POLARISERS = ("both", "low", "high")
LIGHTS = ("sodium", "white")
FORMATS = ("jpeg", "png", "tiff", "heic")


@dataclass(frozen=True)
class Scene:
    """Everything needed to render one eyepiece photo.

    Lengths inside the eyepiece are in units of the field-stop radius; the
    scale axis runs along ``u`` (values increase with ``u``), ``v`` across it.
    The phone's parameters are in pixels of the final (displayed) image unless
    said otherwise.
    """

    # --- what is on the prism -------------------------------------------------
    view: str = "facet"
    stone_ris: tuple[float, ...] = (1.544,)   # ray indices at 589.3 nm (1 or 2)
    polariser: str = "both"                   # 'both' (none), 'low' or 'high' ray passed
    ray_weights: tuple[float, ...] | None = None  # explicit weight per ray (overrides polariser)
    stone_material: str | None = None         # key of a published dispersion formula, if any
    stone_abbe: float = 55.0                  # dispersion of the stone otherwise
    liquid_ri: float = 1.79
    liquid_abbe: float = 19.0                 # dense contact liquids are very dispersive (from memory)
    liquid_line: float = 0.05                 # fraction of the table wetted away from the stone
    light: str = "sodium"                     # 'sodium' (589.3 nm) or 'white'
    # --- the spot view only (view='spot', see critline.synth.spot) -------------------
    spot_value: float = 1.66                  # true scale value at the spot's centre (set by the head position)
    spot_length: float = 0.06                 # extent of the spot along the scale, in scale values
    spot_aspect: float = 0.75                 # width across the scale / length along it
    spot_v: float = -0.05                     # across-axis position of the spot's centre (field radii)
    spot_surround: float = 0.3                # brightness of the rest of the field, relative to the bright part
    spot_rim: float = 0.25                    # darkening at the droplet's rim, 0..1
    spot_softness: float = 0.006              # width of the spot's outline (field radii)
    # --- the instrument --------------------------------------------------------
    instrument: Instrument = field(default_factory=lambda: DEFAULT)
    prism_glass: str = "N-LASF31A"
    scale_offset: float = 0.0                 # mis-scaled instrument: true - printed value at mid-scale
    scale_gain: float = 0.0                   # and relative gain error of the printed scale
    u_first: float = -0.8                     # focal-plane position of the first graduation
    u_last: float = 0.8
    spacing_change: float = 0.12              # graduation spacing change end to end (signed)
    spacing_bow: float = 0.0                  # cubic term of the angle-to-position mapping
    axis_v: float = -0.15                     # across-axis offset of the scale's base line
    tick_side: int = 1                        # graduations extend to +v (1) or -v (-1)
    tick_lengths: tuple[float, float, float] = (0.07, 0.11, 0.17)  # short, medium, long
    tick_width: float = 0.007
    ink: float = 0.9                          # opacity of the printed graduations
    labels: bool = True
    label_height: float = 0.05
    spine: bool = True                        # line joining the graduations' bases
    edge_blur: float = 0.004                  # instrument's own blur along the axis (sigma, u units)
    illumination_slope: float = 0.05          # brightness change across the field along u
    illumination_curve: float = 0.0           # and its curvature (uneven lamp)
    stray_light: float = 0.0                  # share of light scattered evenly inside the instrument
    field_falloff: float = 0.1                # darkening toward the field stop's rim
    field_softness: float = 0.01              # width of the field stop's edge
    # --- the phone ----------------------------------------------------------------
    width: int = 1600
    height: int = 1200
    field_cx: float = 0.5                     # field centre, fraction of the frame
    field_cy: float = 0.5
    field_diameter: float = 0.7               # fraction of the frame's short side
    axis_angle_deg: float = 90.0              # direction of increasing values in the image (x right, y down)
    tilt_deg: float = 0.0                     # perspective tilt of the phone
    tilt_axis_deg: float = 0.0
    focal_ratio: float = 0.9                  # phone focal length / long side of the frame
    defocus: float = 0.0                      # Gaussian blur sigma, fraction of field radius
    motion: float = 0.0                       # motion blur length, fraction of field radius
    motion_angle_deg: float = 0.0
    exposure: float = 0.85                    # linear gain; > ~1.1 clips the bright field
    full_well: float = 4000.0                 # electrons at brightness 1 (0: no noise)
    read_noise: float = 3.0                   # electrons
    bayer: bool = True                        # colour filter mosaic and demosaicing
    denoise: float = 0.3                      # phone noise reduction, 0..1
    sharpen: float = 0.4                      # phone sharpening amount
    white_balance: float = 0.5                # how far the phone neutralises the light's colour
    vignetting: float = 0.15                  # phone lens falloff at the frame corner
    glare: float = 0.0                        # veiling glare around the bright field, 0..0.05
    lateral_ca: float = 0.0                   # red/blue magnification difference (chromatic aberration)
    crescent: float = 0.0                     # off-axis pupil clipping: 0 none .. 0.6 deep
    crescent_angle_deg: float = 0.0
    surround: float = 0.015                   # brightness of the dark housing around the field
    dust: int = 0                             # number of dust specks
    jpeg_quality: int = 88
    orientation: int = 1                      # EXIF orientation tag written with the file

    def __post_init__(self):
        if self.view not in VIEWS:
            raise ValueError(f"view {self.view!r} is not supported yet (have {VIEWS})")
        if self.view == "spot" and not (self.spot_length > 0 and 0 < self.spot_aspect <= 2
                                        and 0 <= self.spot_surround < 1 and 0 <= self.spot_rim < 1):
            raise ValueError("spot view: spot_length > 0, 0 < spot_aspect <= 2, spot_surround and spot_rim in [0, 1)")
        if self.polariser not in POLARISERS:
            raise ValueError(f"polariser must be one of {POLARISERS}")
        if self.light not in LIGHTS:
            raise ValueError(f"light must be one of {LIGHTS}")
        if not 1 <= len(self.stone_ris) <= 2 and self.stone_ris != ():
            raise ValueError("stone_ris holds one or two ray indices (or none)")
        if self.ray_weights is not None and len(self.ray_weights) != len(self.stone_ris):
            raise ValueError("ray_weights needs one weight per stone ray")
        if self.orientation not in range(1, 9):
            raise ValueError("orientation is an EXIF orientation tag, 1..8")

    @property
    def weights(self) -> tuple[float, ...]:
        """Share of the light in each stone ray (polariser or explicit)."""
        if self.ray_weights is not None:
            return tuple(float(w) for w in self.ray_weights)
        n = len(self.stone_ris)
        if n <= 1:
            return (1.0,) * n
        order = np.argsort(self.stone_ris)
        w = [0.5, 0.5]
        if self.polariser == "low":
            w = [0.0, 0.0]
            w[order[0]] = 1.0
        elif self.polariser == "high":
            w = [0.0, 0.0]
            w[order[1]] = 1.0
        return tuple(w)

    @property
    def field_radius_px(self) -> float:
        return 0.5 * self.field_diameter * min(self.width, self.height)

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["instrument"] = self.instrument.to_dict()
        return d

    @classmethod
    def from_dict(cls, data: dict) -> Scene:
        data = dict(data)
        if "instrument" in data and isinstance(data["instrument"], dict):
            data["instrument"] = Instrument(**data["instrument"])
        for key in ("stone_ris", "ray_weights", "tick_lengths"):
            if data.get(key) is not None:
                data[key] = tuple(data[key])
        return cls(**data)


def frame_size(megapixels: float, aspect: float = 4 / 3, portrait: bool = False) -> tuple[int, int]:
    """Width and height (even numbers) of a frame of ``megapixels`` with ``aspect`` (long/short)."""
    short = math.sqrt(megapixels * 1e6 / aspect)
    w, h = int(round(short * aspect / 2)) * 2, int(round(short / 2)) * 2
    return (h, w) if portrait else (w, h)


def random_scene(seed: int, **overrides) -> Scene:
    """Draw a scene across the whole photo envelope of the design.

    Ranges (design.md "What a photo can look like"): frame 1-48 MP, field
    diameter 25-95 % of the short side, sometimes clipped by the frame, any
    rotation, tilt up to 10 degrees, defocus and slight motion blur, noise,
    phone sharpening and noise reduction, under- and over-exposure, vignetting
    and an off-axis crescent, dust, JPEG quality 70-95, EXIF orientation,
    sodium or white light, 0-2 stone edges, over the limit, a faint liquid
    line, spacing change 5-20 % end to end.  ``overrides`` replace any field
    after drawing (``megapixels=`` sets the frame size).
    """
    rng = np.random.default_rng([seed, 0x5C4E])
    megapixels = overrides.pop("megapixels", None)
    if megapixels is None:
        megapixels = float(np.exp(rng.uniform(np.log(1.0), np.log(48.0))))
    aspect = float(rng.choice([4 / 3, 16 / 9, 3 / 2]))
    width, height = frame_size(megapixels, aspect, portrait=bool(rng.random() < 0.3))

    liquid = float(rng.uniform(1.78, 1.81))
    kind = rng.choice(["single", "double", "over", "none"], p=[0.35, 0.35, 0.2, 0.1])
    if kind == "single":
        ris = (float(rng.uniform(1.40, liquid - 0.02)),)
    elif kind == "double":
        low = float(rng.uniform(1.40, liquid - 0.05))
        ris = (low, float(min(low + rng.uniform(0.004, 0.04), liquid - 0.005)))
    elif kind == "over":
        ris = (float(rng.uniform(liquid + 0.01, 2.2)),)
    else:
        ris = ()
    polariser = str(rng.choice(POLARISERS)) if len(ris) == 2 else "both"

    diameter = float(rng.uniform(0.25, 0.95))
    clipped = rng.random() < 0.15
    short = min(width, height)
    r = 0.5 * diameter * short
    # keep the field inside unless drawn clipped; then let up to 30 % of the radius leave the frame
    spill = 0.3 * r if clipped else -0.02 * r
    cx = rng.uniform(r - spill, width - r + spill) / width if width - 2 * (r - spill) > 0 else 0.5
    cy = rng.uniform(r - spill, height - r + spill) / height if height - 2 * (r - spill) > 0 else 0.5

    change = float(rng.uniform(0.06, 0.17) * rng.choice([-1, 1]))
    half = float(rng.uniform(0.65, 0.85))
    centre = float(rng.uniform(-0.08, 0.08))
    scene = Scene(
        stone_ris=ris,
        polariser=polariser,
        stone_abbe=float(rng.uniform(30, 70)),
        liquid_ri=liquid,
        liquid_line=float(rng.choice([0.0, rng.uniform(0.02, 0.1)], p=[0.3, 0.7])),
        light=str(rng.choice(LIGHTS, p=[0.7, 0.3])),
        u_first=centre - half,
        u_last=centre + half,
        spacing_change=change,
        spacing_bow=float(rng.uniform(-0.02, 0.02)),
        axis_v=float(rng.uniform(-0.35, 0.2)),
        tick_side=int(rng.choice([-1, 1])),
        tick_width=float(rng.uniform(0.004, 0.01)),
        ink=float(rng.uniform(0.7, 0.95)),
        labels=bool(rng.random() < 0.85),
        label_height=float(rng.uniform(0.035, 0.06)),
        spine=bool(rng.random() < 0.6),
        edge_blur=float(rng.uniform(0.001, 0.008)),
        illumination_slope=float(rng.uniform(-0.15, 0.15)),
        illumination_curve=float(rng.uniform(-0.1, 0.1)),
        stray_light=float(rng.uniform(0.0, 0.06)),
        field_falloff=float(rng.uniform(0.0, 0.25)),
        field_softness=float(rng.uniform(0.004, 0.03)),
        width=width,
        height=height,
        field_cx=float(cx),
        field_cy=float(cy),
        field_diameter=diameter,
        axis_angle_deg=float(rng.uniform(0, 360)),
        tilt_deg=float(rng.uniform(0, 10)),
        tilt_axis_deg=float(rng.uniform(0, 360)),
        focal_ratio=float(rng.uniform(0.7, 1.2)),
        defocus=float(rng.choice([0.0, rng.uniform(0.0005, 0.008)], p=[0.3, 0.7])),
        motion=float(rng.choice([0.0, rng.uniform(0.001, 0.008)], p=[0.6, 0.4])),
        motion_angle_deg=float(rng.uniform(0, 180)),
        exposure=float(np.exp(rng.uniform(np.log(0.35), np.log(1.8)))),
        full_well=float(np.exp(rng.uniform(np.log(400), np.log(12000)))),
        read_noise=float(rng.uniform(1.0, 6.0)),
        denoise=float(rng.uniform(0.0, 0.8)),
        sharpen=float(rng.uniform(0.0, 1.0)),
        white_balance=float(rng.uniform(0.0, 0.9)),
        vignetting=float(rng.uniform(0.0, 0.4)),
        glare=float(rng.uniform(0.0, 0.04)),
        lateral_ca=float(rng.choice([0.0, rng.uniform(0.0002, 0.0012)], p=[0.5, 0.5])),
        crescent=float(rng.choice([0.0, rng.uniform(0.05, 0.5)], p=[0.6, 0.4])),
        crescent_angle_deg=float(rng.uniform(0, 360)),
        surround=float(rng.uniform(0.0, 0.05)),
        dust=int(rng.choice([0, rng.integers(1, 12)], p=[0.4, 0.6])),
        jpeg_quality=int(rng.integers(70, 96)),
        orientation=int(rng.choice([1, 1, 1, 3, 6, 8])),
    )
    return dataclasses.replace(scene, **overrides) if overrides else scene


def clean_overrides() -> dict:
    """Overrides that remove every degradation of the phone (for exact measurements)."""
    return dict(tilt_deg=0.0, defocus=0.0, motion=0.0, full_well=0.0, bayer=False, denoise=0.0, sharpen=0.0,
                vignetting=0.0, glare=0.0, lateral_ca=0.0, crescent=0.0, dust=0, exposure=0.8, field_falloff=0.0,
                illumination_slope=0.0, orientation=1, jpeg_quality=95)

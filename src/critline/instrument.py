"""Description of a refractometer scale: the instrument file.

An instrument file is a small TOML document::

    name = "invented bench refractometer"
    first = 1.30          # value of the first graduation
    last = 1.80           # value of the last graduation
    step = 0.01           # value between neighbouring graduations
    medium_every = 5      # every 5th graduation is longer
    long_every = 10       # every 10th longer still
    labelled_every = 10   # which graduations carry a printed value (0: none)
    liquid_ri = 1.79      # contact liquid index, sets the limit of the instrument
    prism_glass = "N-LASF31A"   # optional: the prism glass's dispersion formula, by name

All keys are optional; missing ones take the defaults of :data:`DEFAULT`.

``prism_glass`` names a Sellmeier formula of the glass table
``critline/synth/data/glasses.csv`` (each row with its published source); it is
used only to read white-light photos (:mod:`critline.photo.whitelight`).  Left
out (or empty) the instrument names no glass and the white-light reading takes
its default; such an instrument's :meth:`Instrument.to_dict` has no
``prism_glass`` key, so files, sidecars and cache keys written before the key
existed are unchanged.
"""

from __future__ import annotations

import tomllib
from dataclasses import asdict, dataclass, replace
from pathlib import Path


@dataclass(frozen=True)
class Instrument:
    name: str = "default 1.30-1.80 scale"
    first: float = 1.30
    last: float = 1.80
    step: float = 0.01
    medium_every: int = 5
    long_every: int = 10
    labelled_every: int = 10
    liquid_ri: float = 1.79
    prism_glass: str = ""  # "" = not named (white-light reading takes its default glass)

    @property
    def count(self) -> int:
        """Number of graduations on the scale."""
        return int(round((self.last - self.first) / self.step)) + 1

    def value(self, position):
        """Nominal scale value at a position in graduation units from the first graduation."""
        return self.first + self.step * position

    def position(self, value):
        """Position in graduation units of a nominal scale value."""
        return (value - self.first) / self.step

    def kind(self, index: int) -> str:
        """'long', 'medium' or 'short' for the graduation with this index from the first."""
        absolute = int(round(self.first / self.step)) + index
        if self.long_every and absolute % self.long_every == 0:
            return "long"
        if self.medium_every and absolute % self.medium_every == 0:
            return "medium"
        return "short"

    def to_dict(self) -> dict:
        d = asdict(self)
        if not d["prism_glass"]:
            del d["prism_glass"]  # as before the key existed (sidecars, cache keys)
        return d


DEFAULT = Instrument()


class InstrumentError(ValueError):
    """An instrument file that cannot be used."""


def load_instrument(path: str | Path | None) -> Instrument:
    """Read an instrument file; ``None`` gives :data:`DEFAULT`."""
    if path is None:
        return DEFAULT
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InstrumentError(f"{path}: cannot read instrument file ({exc})") from exc
    known = set(Instrument.__dataclass_fields__)
    unknown = set(data) - known
    if unknown:
        raise InstrumentError(f"{path}: unknown keys {sorted(unknown)}")
    for key, value in data.items():
        expected = type(getattr(DEFAULT, key))
        ok = isinstance(value, expected) or (expected is float and isinstance(value, int))
        if not ok or isinstance(value, bool):
            raise InstrumentError(f"{path}: {key} must be a {expected.__name__}, got {value!r}")
    inst = replace(DEFAULT, **{k: (float(v) if isinstance(getattr(DEFAULT, k), float) else v)
                               for k, v in data.items()})
    if not (1.0 < inst.first < inst.last < 3.5) or inst.step <= 0 or inst.count < 5:
        raise InstrumentError(f"{path}: first/last/step do not describe a usable scale")
    if inst.prism_glass:
        from critline.synth.dispersion import glasses  # plain data table, no rendering

        if inst.prism_glass not in glasses():
            raise InstrumentError(f"{path}: prism_glass {inst.prism_glass!r} is not in the glass table "
                                  f"(known: {', '.join(sorted(glasses()))})")
    return inst

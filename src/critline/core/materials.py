"""The materials table: what a stone's readings are compared with.

The table is a plain TOML file shipped in the package
(``critline/data/materials.toml``), one ``[[material]]`` table per entry; its
header documents the columns.  :func:`load_materials` reads and validates it
into frozen :class:`Material` records.  A bad row raises
:class:`MaterialsError` naming the file, the row and the reason.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path

from critline.errors import UsageError

__all__ = [
    "CHARACTERS",
    "IndexRange",
    "Material",
    "MaterialsError",
    "load_materials",
    "materials_by_key",
]

#: optic characters a table entry may have
CHARACTERS = ("isotropic", "uniaxial", "biaxial", "aggregate", "amorphous")

#: index columns each character needs, in order of increasing index for biaxial
_INDEX_COLUMNS = {
    "isotropic": ("n",),
    "aggregate": ("n",),
    "amorphous": ("n",),
    "uniaxial": ("omega", "epsilon"),
    "biaxial": ("alpha", "beta", "gamma"),
}
_ALL_INDEX_COLUMNS = ("n", "omega", "epsilon", "alpha", "beta", "gamma")
_KNOWN_KEYS = {
    "key", "aliases", "character", "sign", "birefringence", "sg", "notes", "source",
    *_ALL_INDEX_COLUMNS,
}
_RI_BOUNDS = (1.0, 3.5)


class MaterialsError(UsageError):
    """A materials table that cannot be used (names the file, the row and the reason)."""


@dataclass(frozen=True)
class IndexRange:
    """One principal refractive index (or the index of an isotropic material) and its natural range."""

    name: str  # n, omega, epsilon, alpha, beta or gamma
    low: float
    high: float

    @property
    def mid(self) -> float:
        return 0.5 * (self.low + self.high)


@dataclass(frozen=True)
class Material:
    """One row of the materials table."""

    key: str
    aliases: tuple[str, ...]
    indices: tuple[IndexRange, ...]
    birefringence: tuple[float, float]
    optic_character: str
    sign: str | None
    sg: tuple[float, float] | None
    notes: str = ""
    source: str = ""
    from_memory: bool = field(default=False, compare=False)

    def index(self, name: str) -> IndexRange | None:
        """The principal index called ``name`` (``n``, ``omega``, ... ) or ``None``."""
        for item in self.indices:
            if item.name == name:
                return item
        return None

    @property
    def ri_range(self) -> tuple[float, float]:
        """Lowest and highest index this material can show on the refractometer."""
        return min(i.low for i in self.indices), max(i.high for i in self.indices)

    @property
    def is_doubly_refractive(self) -> bool:
        return self.optic_character in ("uniaxial", "biaxial")

    def names(self) -> tuple[str, ...]:
        return (self.key, *self.aliases)


def _pair(value, what: str) -> tuple[float, float]:
    if (
        not isinstance(value, list)
        or len(value) != 2
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
    ):
        raise ValueError(f"{what} must be a [min, max] pair of numbers, got {value!r}")
    low, high = float(value[0]), float(value[1])
    if low > high:
        raise ValueError(f"{what} has min {low} above max {high}")
    return low, high


def _material_from_row(row: dict) -> Material:
    unknown = set(row) - _KNOWN_KEYS
    if unknown:
        raise ValueError(f"unknown columns {sorted(unknown)}")
    key = row.get("key")
    if not isinstance(key, str) or not key.strip() or key != key.strip().lower():
        raise ValueError(f"key must be a non-empty lowercase name, got {key!r}")
    aliases = row.get("aliases", [])
    if not isinstance(aliases, list) or not all(
        isinstance(a, str) and a == a.strip().lower() and a for a in aliases
    ):
        raise ValueError("aliases must be a list of lowercase names")
    character = row.get("character")
    if character not in CHARACTERS:
        raise ValueError(f"character must be one of {', '.join(CHARACTERS)}, got {character!r}")
    sign = row.get("sign", "")
    if sign not in ("+", "-", ""):
        raise ValueError(f"sign must be '+', '-' or '' (not applicable or varies), got {sign!r}")
    if sign and character not in ("uniaxial", "biaxial"):
        raise ValueError(f"a {character} material has no optic sign")

    wanted = _INDEX_COLUMNS[character]
    present = [c for c in _ALL_INDEX_COLUMNS if c in row]
    if sorted(present) != sorted(wanted):
        raise ValueError(
            f"a {character} material needs index columns {list(wanted)}, found {present}"
        )
    indices = tuple(IndexRange(name, *_pair(row[name], name)) for name in wanted)
    for item in indices:
        if not (_RI_BOUNDS[0] < item.low and item.high < _RI_BOUNDS[1]):
            raise ValueError(f"{item.name} {item.low}-{item.high} is outside 1.0-3.5")

    bire = _pair(row.get("birefringence"), "birefringence")
    if bire[0] < 0:
        raise ValueError("birefringence cannot be negative")
    if character == "isotropic" and bire[1] > 0:
        raise ValueError("an isotropic material has birefringence [0.0, 0.0]")
    if character == "uniaxial":
        omega, epsilon = indices
        if sign == "+" and not epsilon.mid > omega.mid:
            raise ValueError("sign '+' needs epsilon above omega")
        if sign == "-" and not epsilon.mid < omega.mid:
            raise ValueError("sign '-' needs epsilon below omega")
        widest = max(abs(epsilon.high - omega.low), abs(omega.high - epsilon.low))
        if bire[0] > widest + 1e-9:
            raise ValueError(f"birefringence {bire} cannot come from omega and epsilon ranges")
    if character == "biaxial":
        alpha, beta, gamma = indices
        if not (alpha.low <= beta.low <= gamma.low and alpha.high <= beta.high <= gamma.high):
            raise ValueError("biaxial ranges must satisfy alpha <= beta <= gamma")
        if bire[0] > gamma.high - alpha.low + 1e-9:
            raise ValueError(f"birefringence {bire} is larger than gamma - alpha allows")
        if sign:
            # sign from the middle of the ranges: '+' when beta is nearer alpha
            mid_sign = "+" if (beta.mid - alpha.mid) < (gamma.mid - beta.mid) else "-"
            if mid_sign != sign:
                raise ValueError(
                    f"sign {sign!r} disagrees with the middle of the alpha/beta/gamma ranges"
                )

    if character in ("uniaxial", "biaxial"):
        # the birefringence of a typical stone (middle of the ranges) must be in the stated range
        typical = max(i.mid for i in indices) - min(i.mid for i in indices)
        if not (bire[0] - 0.002 <= typical <= bire[1] + 0.002):
            raise ValueError(
                f"birefringence {bire} does not hold {typical:.4f}, the difference of the middles "
                "of the principal index ranges"
            )

    sg = row.get("sg")
    sg_pair = None
    if sg is not None:
        sg_pair = _pair(sg, "sg")
        if not (0.5 < sg_pair[0] and sg_pair[1] < 10):
            raise ValueError(f"sg {sg_pair} is outside 0.5-10")
    source = row.get("source", "")
    if not isinstance(source, str) or not source.strip():
        raise ValueError("source must name the published title or say 'from memory'")
    notes = row.get("notes", "")
    if not isinstance(notes, str):
        raise ValueError("notes must be text")
    return Material(
        key=key,
        aliases=tuple(aliases),
        indices=indices,
        birefringence=bire,
        optic_character=character,
        sign=sign or None,
        sg=sg_pair,
        notes=notes,
        source=source,
        from_memory="from memory" in source,
    )


def parse_materials(text: str, origin: str = "materials.toml") -> tuple[Material, ...]:
    """Parse and validate a materials table given as TOML text."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise MaterialsError(f"{origin}: not valid TOML ({exc})") from exc
    unknown = set(data) - {"material"}
    if unknown:
        raise MaterialsError(f"{origin}: unknown top-level keys {sorted(unknown)}")
    rows = data.get("material", [])
    if not isinstance(rows, list) or not rows:
        raise MaterialsError(f"{origin}: no [[material]] entries")
    materials = []
    seen: set[str] = set()
    for number, row in enumerate(rows, start=1):
        label = row.get("key", "?") if isinstance(row, dict) else "?"
        try:
            material = _material_from_row(row)
        except ValueError as exc:
            raise MaterialsError(f"{origin}: entry {number} ({label!r}): {exc}") from None
        if material.key in seen:
            raise MaterialsError(f"{origin}: entry {number} ({label!r}): duplicate key")
        seen.add(material.key)
        materials.append(material)
    return tuple(materials)


@lru_cache(maxsize=4)
def _load_cached(path: str | None) -> tuple[Material, ...]:
    if path is None:
        ref = resources.files("critline").joinpath("data", "materials.toml")
        return parse_materials(ref.read_text(encoding="utf-8"), "critline/data/materials.toml")
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise MaterialsError(f"{p}: cannot read materials table ({exc})") from exc
    return parse_materials(text, str(p))


def load_materials(path: str | Path | None = None) -> tuple[Material, ...]:
    """Read the materials table (the packaged one by default).

    Raises
    ------
    MaterialsError
        When the file cannot be read or a row is invalid; the message names
        the file, the entry number, its key and the reason.
    """
    return _load_cached(None if path is None else str(path))


def materials_by_key(materials=None) -> dict[str, Material]:
    """Map of key -> material."""
    return {m.key: m for m in (materials if materials is not None else load_materials())}

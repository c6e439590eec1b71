"""Which photos belong to which stone, and at which rotation and polariser setting.

Three ways to say it, in order of precedence:

1. A manifest CSV (our own format, see :func:`read_manifest`): one row per photo
   with the columns ``stone,photo`` and optionally ``rotation,polariser,sg``.
   Photo paths are relative to the manifest; paths that climb out of the
   manifest's folder are refused.
2. Folders: every subfolder of the batch folder is one stone (photos anywhere
   below it belong to it); photos lying directly in the batch folder form one
   stone named after the folder.
3. For both, rotation and polariser missing from a manifest are parsed from the
   file name by a regular expression with the named groups ``rotation`` and
   ``polariser`` (:data:`DEFAULT_NAME_PATTERN` matches ``r030_pol0.jpg``,
   ``r030_pol90.jpg`` and ``r030_none.jpg``).

Files that are not images (the synthesizer's ``*.json`` truth sidecars, notes,
manifests) are ignored quietly; hidden files and folders are skipped.  A
symbolic link (photo or stone folder) whose target lies outside the batch
folder (the manifest's folder for a manifest) is not read: it is listed as a
problem of kind ``refused``, one line, and the batch goes on with the rest.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

from critline.errors import UsageError

#: suffixes read as photos (case-insensitive)
IMAGE_SUFFIXES = frozenset({".jpg", ".jpeg", ".png", ".tif", ".tiff", ".heic", ".heif", ".webp", ".bmp"})

#: rotation ``r<degrees>``, then ``_pol<degrees>`` or ``_none`` (no polariser)
DEFAULT_NAME_PATTERN = r"(?:^|[_\-\s])r(?P<rotation>\d+(?:\.\d+)?)(?:[_\-\s]+(?:pol(?P<polariser>\d+(?:\.\d+)?)|(?P<nopol>none)))?(?:$|[_\-\s.])"

#: words in a manifest's polariser column that mean "no polariser in the light path"
NO_POLARISER_WORDS = frozenset({"none", "no", "off", "-"})


@dataclass(frozen=True)
class PhotoItem:
    """One photo of a stone, with what is known about how it was taken.

    Attributes
    ----------
    path : Path
        Where the file is.
    display : str
        The name shown in messages and reports (relative to the batch folder).
    stone : str
        Name of the stone the photo belongs to.
    rotation : float or None
        Rotation of the stone on the prism in degrees; None when unknown.
    polariser : float or None
        Polariser orientation in degrees; None when there was none or it is unknown.
    polariser_setting : str
        ``"0"``, ``"90"``, ... , ``"none"`` (stated: no polariser) or ``"unknown"``.
    """

    path: Path
    display: str
    stone: str
    rotation: float | None = None
    polariser: float | None = None
    polariser_setting: str = "unknown"


@dataclass(frozen=True)
class StoneGroup:
    """The photos of one stone, in taking order (rotation, polariser, name)."""

    name: str
    photos: tuple[PhotoItem, ...]
    sg: float | None = None


@dataclass(frozen=True)
class Problem:
    """Something in the batch that gave no reading, said in one line."""

    photo: str
    reason: str
    kind: str = "rejected"  # 'rejected' | 'unreadable' | 'refused' | 'empty'

    def line(self) -> str:
        return f"{self.photo}: {self.reason}"

    def to_json(self) -> dict:
        return {"photo": self.photo, "kind": self.kind, "reason": self.reason}


@dataclass(frozen=True)
class Grouping:
    stones: tuple[StoneGroup, ...]
    problems: tuple[Problem, ...]
    source: str  # 'folders' | 'manifest'
    root: Path


def compile_name_pattern(pattern: str | None) -> re.Pattern:
    """Compile a user's file-name pattern; it must name ``rotation`` and/or ``polariser``."""
    text = DEFAULT_NAME_PATTERN if pattern is None else pattern
    try:
        rx = re.compile(text, re.IGNORECASE)
    except re.error as exc:
        raise UsageError(f"name pattern {text!r}: not a regular expression ({exc})") from None
    if not ({"rotation", "polariser"} & set(rx.groupindex)):
        raise UsageError(
            f"name pattern {text!r}: needs a named group (?P<rotation>...) and/or (?P<polariser>...)"
        )
    return rx


def parse_name(name: str, pattern: re.Pattern) -> tuple[float | None, float | None, str]:
    """Rotation, polariser and polariser setting from a file name (without folders).

    Returns ``(None, None, "unknown")`` when the pattern does not match.
    """
    m = pattern.search(name)
    if not m:
        return None, None, "unknown"
    groups = m.groupdict()
    rotation = _angle(groups.get("rotation"))
    pol_text = groups.get("polariser")
    polariser = _angle(pol_text)
    if polariser is not None:
        setting = _format_angle(polariser)
    elif groups.get("nopol") or (pol_text and pol_text.strip().lower() in NO_POLARISER_WORDS):
        setting = "none"
    else:
        setting = "unknown"
    return rotation, polariser, setting


def _angle(text) -> float | None:
    if text is None or str(text).strip() == "":
        return None
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _format_angle(value: float) -> str:
    return f"{value:g}"


def is_photo_name(name: str) -> bool:
    return not name.startswith(".") and Path(name).suffix.lower() in IMAGE_SUFFIXES


def _natural_key(text: str):
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", text)]


def _order(items: list[PhotoItem]) -> tuple[PhotoItem, ...]:
    def key(it: PhotoItem):
        rot = it.rotation if it.rotation is not None else math.inf
        pol = it.polariser if it.polariser is not None else -1.0
        return (rot, pol, _natural_key(it.display))

    return tuple(sorted(items, key=key))


def _walk_photos(top: Path, skip: set[Path]) -> list[Path]:
    """Photos below ``top`` (recursively), hidden entries and ``skip`` folders left out."""
    found = []
    for dirpath, dirnames, filenames in os.walk(top, followlinks=False):
        here = Path(dirpath)
        dirnames[:] = sorted(
            d for d in dirnames if not d.startswith(".") and _resolved(here / d) not in skip
        )
        found.extend(here / f for f in filenames if is_photo_name(f))
    return sorted(found, key=lambda p: _natural_key(str(p)))


#: reason given for a symbolic link whose target lies outside the batch's folder
OUTSIDE_LINK = "symbolic link to {what} outside the {where} (refused)"


def links_outside(path: Path, root_resolved: Path) -> bool:
    """True when ``path`` (through symbolic links anywhere on the way) ends outside ``root_resolved``.

    The same rule as for calibration manifests (:mod:`critline.calibration.manifest`): the
    resolved target must lie in the resolved folder, so a link cannot bring a file from
    elsewhere on the disk into a batch (or its report).
    """
    real = _resolved(path)
    return real != root_resolved and root_resolved not in real.parents


def _resolved(path: Path) -> Path:
    try:
        return path.resolve()
    except OSError:
        return path.absolute()


def group_folder(folder: str | Path, *, name_pattern: str | None = None,
                 skip: tuple[Path, ...] = ()) -> Grouping:
    """Group the photos of a batch folder into stones, one per subfolder.

    Parameters
    ----------
    folder : path
        The batch folder.
    name_pattern : str, optional
        Regular expression with named groups ``rotation`` / ``polariser``;
        default :data:`DEFAULT_NAME_PATTERN`.
    skip : paths
        Folders never read as photos (the output folder when it lies inside).

    Returns
    -------
    Grouping
        Stones in name order; an empty stone folder is listed as a problem.
    """
    root = Path(folder)
    if not root.is_dir():
        raise UsageError(f"{root}: not a folder")
    rx = compile_name_pattern(name_pattern)
    skip_set = {_resolved(Path(s)) for s in skip}
    stones: list[StoneGroup] = []
    problems: list[Problem] = []

    try:
        entries = sorted(root.iterdir(), key=lambda p: _natural_key(p.name))
    except OSError as exc:
        raise UsageError(f"{root}: cannot list folder ({exc.strerror or exc})") from None

    real_root = _resolved(root)

    def inside(paths: list[Path], what: str) -> list[Path]:
        kept = []
        for p in paths:
            if links_outside(p, real_root):
                problems.append(Problem(_display(p, root) + ("/" if what == "a folder" else ""),
                                        OUTSIDE_LINK.format(what=what, where="batch folder"), "refused"))
            else:
                kept.append(p)
        return kept

    # a dangling link is kept: it is a photo the user meant, reported as unreadable later
    loose = inside([p for p in entries if is_photo_name(p.name) and not p.is_dir()], "a file")
    root_name = real_root.name or "stone"
    if loose:
        stones.append(StoneGroup(root_name, _order([_item(p, root, root_name, rx) for p in loose])))

    for sub in entries:
        if sub.name.startswith(".") or not sub.is_dir() or _resolved(sub) in skip_set:
            continue
        if not inside([sub], "a folder"):
            continue
        photos = inside(_walk_photos(sub, skip_set), "a file")
        if not photos:
            problems.append(Problem(_display(sub, root) + "/", "no photos in this stone folder", "empty"))
            continue
        stones.append(StoneGroup(sub.name, _order([_item(p, root, sub.name, rx) for p in photos])))
    return Grouping(tuple(stones), tuple(problems), "folders", root)


def _display(path: Path, root: Path) -> str:
    try:
        return path.relative_to(root).as_posix()
    except ValueError:
        return str(path)


def _item(path: Path, root: Path, stone: str, rx: re.Pattern) -> PhotoItem:
    rotation, polariser, setting = parse_name(path.name, rx)
    return PhotoItem(path=path, display=_display(path, root), stone=stone, rotation=rotation,
                     polariser=polariser, polariser_setting=setting)


def read_manifest(manifest: str | Path, *, name_pattern: str | None = None) -> Grouping:
    """Group photos into stones as a manifest CSV says.

    The manifest is CSV with a header row.  Columns (any order, case-insensitive):

    ``photo`` (required)
        Path of the photo relative to the manifest's folder; absolute paths and
        paths that climb out of that folder (``..``) are refused.
    ``stone``
        Stone name; when missing, the photo's folder name.
    ``rotation``
        Degrees; empty when unknown (then the file name pattern is tried).
    ``polariser``
        Degrees, or ``none`` for no polariser; empty when unknown.
    ``sg``
        Specific gravity of the stone if measured (all rows of a stone must agree).

    Raises
    ------
    UsageError
        An unreadable manifest, a missing column, a refused path or a bad value,
        naming the manifest and the line.
    """
    manifest = Path(manifest)
    rx = compile_name_pattern(name_pattern)
    try:
        text = manifest.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise UsageError(f"{manifest}: cannot read manifest ({getattr(exc, 'strerror', None) or exc})") from None
    reader = csv.DictReader(io.StringIO(text))
    if reader.fieldnames is None:
        raise UsageError(f"{manifest}: empty manifest (expected a header row with a 'photo' column)")
    columns = {c.strip().lower(): c for c in reader.fieldnames if c}
    if "photo" not in columns:
        raise UsageError(f"{manifest}: no 'photo' column (header: {', '.join(reader.fieldnames)})")
    unknown = set(columns) - {"photo", "stone", "rotation", "polariser", "sg"}
    if unknown:
        raise UsageError(f"{manifest}: unknown column(s) {', '.join(sorted(unknown))}")

    base = Path(os.path.abspath(manifest.parent))
    real_base = _resolved(base)
    by_stone: dict[str, list[PhotoItem]] = {}
    sg_by_stone: dict[str, float] = {}
    problems: list[Problem] = []
    seen: set[str] = set()
    for lineno, row in enumerate(reader, start=2):
        def cell(name, row=row):
            col = columns.get(name)
            return (row.get(col) or "").strip() if col else ""

        rel = cell("photo")
        if not rel:
            if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
                continue  # blank line
            raise UsageError(f"{manifest}:{lineno}: empty photo path")
        rel_path = Path(rel)
        if rel_path.is_absolute() or rel.startswith(("/", "\\")):
            raise UsageError(f"{manifest}:{lineno}: {rel}: absolute paths are refused (give paths relative to the manifest)")
        target = Path(os.path.normpath(base / rel_path))
        if target != base and base not in target.parents:
            raise UsageError(f"{manifest}:{lineno}: {rel}: path climbs out of the manifest's folder (refused)")
        display = target.relative_to(base).as_posix()
        stone = cell("stone") or (target.parent.name if target.parent != base else (base.name or "stone"))
        rotation_text, pol_text = cell("rotation"), cell("polariser")
        rotation = _manifest_angle(rotation_text, manifest, lineno, "rotation")
        if pol_text.lower() in NO_POLARISER_WORDS:
            polariser, setting = None, "none"
        else:
            polariser = _manifest_angle(pol_text, manifest, lineno, "polariser")
            setting = _format_angle(polariser) if polariser is not None else "unknown"
        if rotation is None or setting == "unknown":
            n_rot, n_pol, n_set = parse_name(target.name, rx)
            rotation = rotation if rotation is not None else n_rot
            if setting == "unknown":
                polariser, setting = n_pol, n_set
        sg_text = cell("sg")
        if sg_text:
            try:
                sg = float(sg_text)
            except ValueError:
                raise UsageError(f"{manifest}:{lineno}: sg {sg_text!r} is not a number") from None
            if not (1.0 <= sg <= 10.0):
                raise UsageError(f"{manifest}:{lineno}: sg {sg} outside 1..10")
            if stone in sg_by_stone and abs(sg_by_stone[stone] - sg) > 1e-9:
                raise UsageError(f"{manifest}:{lineno}: stone {stone!r} has two different sg values")
            sg_by_stone[stone] = sg
        if display in seen:
            raise UsageError(f"{manifest}:{lineno}: {rel}: listed twice")
        seen.add(display)
        if not is_photo_name(target.name):
            problems.append(Problem(display, "not a photo file type this tool reads", "unreadable"))
            continue
        if links_outside(target, real_base):
            problems.append(Problem(display, OUTSIDE_LINK.format(what="a file", where="manifest's folder"),
                                    "refused"))
            continue
        by_stone.setdefault(stone, []).append(
            PhotoItem(path=target, display=display, stone=stone, rotation=rotation,
                      polariser=polariser, polariser_setting=setting))
    if not by_stone and not problems:
        raise UsageError(f"{manifest}: lists no photos")
    stones = tuple(StoneGroup(name, _order(items), sg_by_stone.get(name))
                   for name, items in sorted(by_stone.items(), key=lambda kv: _natural_key(kv[0])))
    return Grouping(stones, tuple(problems), "manifest", base)


def _manifest_angle(text: str, manifest: Path, lineno: int, what: str) -> float | None:
    if text == "":
        return None
    try:
        value = float(text)
    except ValueError:
        raise UsageError(f"{manifest}:{lineno}: {what} {text!r} is not a number of degrees") from None
    if not math.isfinite(value):
        raise UsageError(f"{manifest}:{lineno}: {what} {text!r} is not finite")
    return value


def group_photos(source: str | Path, *, name_pattern: str | None = None,
                 skip: tuple[Path, ...] = ()) -> Grouping:
    """A folder (stones by subfolder) or a manifest ``.csv`` file."""
    path = Path(source)
    if path.is_file() and path.suffix.lower() == ".csv":
        return read_manifest(path, name_pattern=name_pattern)
    if not path.exists():
        raise UsageError(f"{path}: no such folder or manifest")
    return group_folder(path, name_pattern=name_pattern, skip=skip)

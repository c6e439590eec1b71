"""Grouping photos into stones: subfolders, loose photos, manifests, file-name patterns."""

from pathlib import Path

import pytest

from critline.batch.grouping import (
    DEFAULT_NAME_PATTERN,
    compile_name_pattern,
    group_folder,
    group_photos,
    parse_name,
    read_manifest,
)
from critline.errors import UsageError


def touch(path: Path, data: bytes = b"x") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)
    return path


@pytest.mark.parametrize("name, rotation, polariser, setting", [
    ("r030_pol0.jpg", 30.0, 0.0, "0"),
    ("r030_pol90.jpg", 30.0, 90.0, "90"),
    ("r150_none.jpg", 150.0, None, "none"),
    ("R045_POL90.PNG", 45.0, 90.0, "90"),
    ("r000.jpg", 0.0, None, "unknown"),
    ("stone-r22.5_pol45.tif", 22.5, 45.0, "45"),
    ("IMG_2041.jpg", None, None, "unknown"),      # a phone's own name: nothing known
    ("brown_r.jpg", None, None, "unknown"),
])
def test_default_pattern_reads_the_synth_naming(name, rotation, polariser, setting):
    assert parse_name(name, compile_name_pattern(None)) == (rotation, polariser, setting)


def test_user_pattern_and_bad_patterns():
    rx = compile_name_pattern(r"turn(?P<rotation>\d+)-filter(?P<polariser>\d+|none)")
    assert parse_name("ring3-turn90-filter45.heic", rx) == (90.0, 45.0, "45")
    assert parse_name("ring3-turn90-filternone.heic", rx) == (90.0, None, "none")
    with pytest.raises(UsageError, match="named group"):
        compile_name_pattern(r"r(\d+)")
    with pytest.raises(UsageError, match="not a regular expression"):
        compile_name_pattern(r"r(?P<rotation>\d+")
    assert "rotation" in DEFAULT_NAME_PATTERN


def test_one_stone_per_subfolder_sidecars_hidden_and_empty(tmp_path):
    for name in ("r090_pol0.jpg", "r000_pol90.jpg", "r000_pol0.jpg", "r000_pol0.json", "notes.txt",
                 ".r030_pol0.jpg"):
        touch(tmp_path / "stone-b" / name)
    touch(tmp_path / "stone-a" / "deep" / "r10_none.png")
    touch(tmp_path / ".hidden" / "r000_pol0.jpg")
    (tmp_path / "stone-c").mkdir()
    out = tmp_path / "out"
    touch(out / "overlays" / "x.png")
    g = group_folder(tmp_path, skip=(out,))
    assert [s.name for s in g.stones] == ["stone-a", "stone-b"]
    b = g.stones[1]
    # taking order: rotation, then polariser; sidecar, text and hidden files ignored
    assert [p.display for p in b.photos] == ["stone-b/r000_pol0.jpg", "stone-b/r000_pol90.jpg",
                                             "stone-b/r090_pol0.jpg"]
    assert g.stones[0].photos[0].display == "stone-a/deep/r10_none.png"
    assert [(p.photo, p.kind) for p in g.problems] == [("stone-c/", "empty")]


def test_loose_photos_are_one_stone_named_after_the_folder(tmp_path):
    folder = tmp_path / "violet-ring"
    touch(folder / "a.jpg")
    touch(folder / "b.JPEG")
    g = group_folder(folder)
    assert [(s.name, len(s.photos)) for s in g.stones] == [("violet-ring", 2)]
    assert all(p.rotation is None and p.polariser_setting == "unknown" for p in g.stones[0].photos)


def test_manifest_groups_and_parses(tmp_path):
    touch(tmp_path / "shots" / "IMG_1.jpg")
    touch(tmp_path / "shots" / "IMG_2.jpg")
    touch(tmp_path / "shots" / "r045_pol90.jpg")
    m = tmp_path / "stones.csv"
    m.write_text("stone,photo,rotation,polariser,sg\n"
                 "green oval,shots/IMG_1.jpg,0,0,2.71\n"
                 "green oval,shots/IMG_2.jpg,0,none,2.71\n"
                 "\n"
                 "pale cushion,shots/r045_pol90.jpg,,,\n")
    g = group_photos(m)
    assert g.source == "manifest"
    oval, cushion = sorted(g.stones, key=lambda s: s.name)
    assert oval.sg == 2.71
    # taking order: rotation, then no polariser before polariser angles
    assert [(p.rotation, p.polariser, p.polariser_setting) for p in oval.photos] == [
        (0.0, None, "none"), (0.0, 0.0, "0")]
    # empty cells fall back to the file name pattern
    assert (cushion.photos[0].rotation, cushion.photos[0].polariser) == (45.0, 90.0)


@pytest.mark.parametrize("row, message", [
    ("s,../outside.jpg,,", "climbs out"),
    ("s,shots/../../outside.jpg,,", "climbs out"),
    ("s,/etc/passwd.jpg,,", "absolute"),
    ("s,shots/a.jpg,ninety,", "not a number"),
])
def test_manifest_refuses_bad_rows(tmp_path, row, message):
    touch(tmp_path / "shots" / "a.jpg")
    m = tmp_path / "m.csv"
    m.write_text("stone,photo,rotation,polariser\n" + row + "\n")
    with pytest.raises(UsageError, match=message) as err:
        read_manifest(m)
    assert "m.csv:2" in str(err.value)


def test_manifest_needs_photo_column(tmp_path):
    m = tmp_path / "m.csv"
    m.write_text("stone,file\nx,y.jpg\n")
    with pytest.raises(UsageError, match="'photo' column"):
        read_manifest(m)


def test_not_a_folder(tmp_path):
    with pytest.raises(UsageError, match="no such folder"):
        group_photos(tmp_path / "missing")

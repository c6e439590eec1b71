"""The result cache: lossless round trip, keyed by photo bytes, calibration and instrument."""

import math
from dataclasses import replace

from critline.batch.cache import ReadingCache, file_sha256, reading_from_record, reading_to_record
from critline.instrument import DEFAULT
from critline.readings import Edge, PhotoReading, Quality


def sample_reading():
    return PhotoReading(
        photo="a/r000_pol0.jpg", sha256="ab" * 32, status="ok",
        edges=(Edge(1.5442, 0.0004, "stone", 24.42, 0.04, 0.61, field_position=-0.2, flags=("x",)),
               Edge(1.79, 0.001, "liquid", math.nan, 0.1, 0.1)),
        light="white", quality=Quality(("blurred",), {"sharpness": 0.3, "n": 4, "name": "z"}),
        profile=((0.0, 0.5, 1.0), (0.1, 0.2, 0.9)), field_circle=(10.0, 20.0, 5.0))


def test_round_trip_is_lossless():
    r = sample_reading()
    back = reading_from_record(reading_to_record(r))
    assert back.edges[0] == r.edges[0]
    assert math.isnan(back.edges[1].scale_position)
    assert replace(back, edges=()) == replace(r, edges=())


def test_key_depends_on_calibration_and_instrument(tmp_path):
    r = sample_reading()
    c1 = ReadingCache(tmp_path, "cal-1", DEFAULT)
    c1.put(r, overlay=None)
    assert c1.get(r.sha256, "renamed.jpg")[0].photo == "renamed.jpg"
    assert ReadingCache(tmp_path, "cal-2", DEFAULT).get(r.sha256, "x") is None
    assert ReadingCache(tmp_path, "cal-1", replace(DEFAULT, liquid_ri=1.81)).get(r.sha256, "x") is None
    assert ReadingCache(tmp_path, None, DEFAULT).get(r.sha256, "x") is None


def test_damaged_cache_file_is_ignored(tmp_path):
    r = sample_reading()
    c = ReadingCache(tmp_path, None, DEFAULT)
    path = c.put(r)
    path.write_text('{"schema": "critline.batch-cache/1", "reading": {')
    assert c.get(r.sha256, "x") is None


def test_sha256_of_file(tmp_path):
    # sha256 of the empty string, FIPS 180-4 test vector (common knowledge)
    p = tmp_path / "e"
    p.write_bytes(b"")
    assert file_sha256(p) == "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"


def test_a_changed_reader_reads_again(tmp_path):
    import importlib
    import sys

    from critline.batch.cache import reader_fingerprint

    (tmp_path / "myreader.py").write_text("def read(*a):\n    return 1\n")
    sys.path.insert(0, str(tmp_path))
    try:
        mod = importlib.import_module("myreader")
        before = reader_fingerprint(mod.read)
        (tmp_path / "myreader.py").write_text("def read(*a):\n    return 2\n")
        assert reader_fingerprint(mod.read) != before
    finally:
        sys.path.remove(str(tmp_path))
        sys.modules.pop("myreader", None)
    r = sample_reading()
    ReadingCache(tmp_path, None, DEFAULT, "reader-a").put(r)
    assert ReadingCache(tmp_path, None, DEFAULT, "reader-b").get(r.sha256, "x") is None
    assert ReadingCache(tmp_path, None, DEFAULT, "reader-a").get(r.sha256, "x") is not None

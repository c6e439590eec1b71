"""What a batch keeps in memory per photo: a summary, the full reading re-read from the cache.

A batch of thousands of photos must not hold every reading's brightness profile and quality
figures until its report is written (bench/bench_soak.py measures the memory of a 2,000-photo
run).  These tests check the mechanism and that nothing is lost by it: the full reading that the
reports see is the one the reader returned, and the reports are the same bytes as when every
reading is held whole.
"""

import json
from dataclasses import replace

import pytest
from batchfakes import fake_reader, write_fake_photo

from critline.batch import PhotoResult, run_batch
from critline.batch.run import BatchResult
from critline.batch.work import ReadTask, read_many
from critline.readings import Edge, PhotoReading, Quality
from critline.report import batch_csv, batch_document
from critline.report.html import batch_html


def _parcel(root):
    write_fake_photo(root / "oval" / "r000_pol0.png", [1.5442])
    write_fake_photo(root / "oval" / "r000_pol90.png", [1.5532])
    write_fake_photo(root / "oval" / "r090_none.png", [1.5442, 1.5532])
    write_fake_photo(root / "cushion" / "r000_pol0.png", [1.7180])
    (root / "cushion" / "notes.png").write_bytes(b"not an image")  # rejected: not cached
    return root


def _whole(result: BatchResult) -> BatchResult:
    """The same result with every reading held whole in memory (as before summaries)."""
    stones = tuple(replace(s, photos=tuple(PhotoResult(p.item, p.reading, p.overlay, p.cached)
                                           for p in s.photos)) for s in result.stones)
    return replace(result, stones=stones)


@pytest.mark.parametrize("workers", [1, 2])
def test_only_a_summary_stays_in_memory_and_the_full_reading_is_the_readers(tmp_path, fake_core, workers):
    parcel = _parcel(tmp_path / "parcel")
    res = run_batch(parcel, out_dir=tmp_path / "out", workers=workers, reader=fake_reader)
    photos = [p for s in res.stones for p in s.photos]
    read = [p for p in photos if p.summary.status != "rejected"]
    assert len(read) == 4
    for p in read:
        # in memory: no profile, no quality figures; edges, status and flags as read
        assert p.source is not None and p.summary.profile is None and p.summary.quality.figures == {}
        direct = replace(fake_reader(p.item.path), photo=p.item.display, sha256=p.summary.sha256)
        assert p.reading == direct  # the full reading, from the cache file, equals the reader's
        assert p.summary == replace(direct, profile=None, quality=Quality(flags=direct.quality.flags))
    rejected = [p for p in photos if p.summary.status == "rejected"]
    assert len(rejected) == 1 and rejected[0].reading == rejected[0].summary  # nothing to drop


def test_reports_are_the_same_bytes_as_with_whole_readings(tmp_path, fake_core):
    parcel = _parcel(tmp_path / "parcel")
    for fresh in (True, False):  # read now, then from the cache
        res = run_batch(parcel, out_dir=tmp_path / "out", workers=1, reader=fake_reader, fresh=fresh)
        assert res.counts["cached"] == (0 if fresh else 5)
        whole = _whole(res)
        assert json.dumps(batch_document(res)) == json.dumps(batch_document(whole))
        assert batch_csv(res) == batch_csv(whole)
        html = batch_html(res, generated="then")
        assert html == batch_html(whole, generated="then")
        assert html.count('class="plot profile-plot"') == 4  # every profile drawn from the cache


def test_a_missing_cache_file_leaves_the_summary(tmp_path, fake_core):
    res = run_batch(_parcel(tmp_path / "parcel"), out_dir=tmp_path / "out", workers=1, reader=fake_reader)
    p = next(p for s in res.stones for p in s.photos if p.source)
    full = p.reading
    assert full.profile is not None
    with open(p.source, "w") as fh:
        fh.write("{damaged")
    assert p.reading == p.summary  # edges, status and flags still right; detail gone, nothing invented


def test_a_result_made_without_source_keeps_the_reading_whole():
    reading = PhotoReading(photo="a.jpg", sha256="0" * 64, status="ok",
                           edges=(Edge(1.544, 0.0004, "stone", 24.4, 0.04, 0.6),),
                           quality=Quality(flags=("x",), figures={"sharpness": 1.0}),
                           profile=((0.0, 1.0), (0.2, 0.9)))
    p = PhotoResult(None, reading, None)
    assert p.reading is reading and p.summary is reading and p.source is None


def test_read_many_can_hand_results_on_without_keeping_them(tmp_path):
    write_fake_photo(tmp_path / "a.png", [1.544])
    task = ReadTask(str(tmp_path / "a.png"), "a.png", "0" * 64)
    seen = []
    kept = read_many([task], reader=fake_reader, workers=1,
                     on_result=lambda t, r, o: seen.append(r.status), keep=False)
    assert seen == ["ok"] and kept == [None]
    assert read_many([task], reader=fake_reader, workers=1)[0][0].status == "ok"

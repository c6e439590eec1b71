"""Batches of stones: grouping photos into stones, resumable parallel reading, watching a folder.

Public API
----------
run_batch(source, *, calibration, instrument, out_dir, workers, fresh, name_pattern) -> BatchResult
group_photos(source, *, name_pattern) -> Grouping
watch_folder(folder, ...)  (see :mod:`critline.batch.watch`)

The output folder
-----------------
::

    <out>/cache/<key>.json         one result per photo (key: photo sha256, calibration id,
                                   instrument, critline version); a re-run reads only new photos
    <out>/overlays/<key>/...       the reader's marked-up photo of that result
    <out>/report.json|.csv|.html   the reports; an existing set is kept and the next run writes
                                   report-2.*, report-3.*, ... unless told to overwrite
    <out>/watch-summary.json       `critline watch`: the running state, rewritten after each photo

Every file is written atomically (:mod:`critline.fileio`).
"""

from critline.batch.grouping import (
    DEFAULT_NAME_PATTERN,
    Grouping,
    PhotoItem,
    Problem,
    StoneGroup,
    group_photos,
    parse_name,
    read_manifest,
)
from critline.batch.run import BatchResult, run_batch
from critline.batch.stones import PhotoResult, StoneResult, analyse_stone

__all__ = [
    "DEFAULT_NAME_PATTERN",
    "BatchResult",
    "Grouping",
    "PhotoItem",
    "PhotoResult",
    "Problem",
    "StoneGroup",
    "StoneResult",
    "analyse_stone",
    "group_photos",
    "parse_name",
    "read_manifest",
    "run_batch",
]

"""Batches of stones: grouping photos into stones, resumable parallel reading, watching a folder.

Public API
----------
run_batch(source, *, calibration, instrument, out_dir, workers, fresh, name_pattern) -> BatchResult
group_photos(source, *, name_pattern) -> Grouping
watch_folder(folder, ...)  (see :mod:`critline.batch.watch`)
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

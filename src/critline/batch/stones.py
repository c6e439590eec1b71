"""From the readings of one stone to its analysis and ranked candidates.

The identification core (:mod:`critline.core`) sees numbers only: each usable
photo becomes an ``Observation`` (the stone edges' RIs with uncertainties, the
rotation and polariser if known, whether the stone was over the limit).  What
the core cannot decide (no rotation known, one polariser setting only, ...) it
says in its notes; this module adds what the batch itself knows (photos
rejected, rotation missing).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace

from critline.batch.grouping import PhotoItem, StoneGroup
from critline.errors import CritlineError
from critline.readings import PhotoReading, Quality

#: statuses that carry information about the stone (``no_edge`` too: nothing on the scale)
USABLE = ("ok", "over_limit", "no_edge")


@dataclass(frozen=True, init=False)
class PhotoResult:
    """One photo of a stone and what was read from it.

    A batch keeps thousands of these until its reports are written, so a result
    whose reading is stored in the batch's cache keeps in memory only a
    ``summary`` of it (the reading without its brightness profile and quality
    figures, about a tenth of its size) and the cache file it came from;
    :attr:`reading` loads the full reading from that file when it is asked for
    (the report writers ask once per photo).  Without ``source`` the reading
    is kept whole, as given.

    Parameters
    ----------
    item : PhotoItem
    reading : PhotoReading
        The full reading.
    overlay : str, optional
        The marked-up photo.
    cached : bool
        Taken from an earlier run's cache.
    source : path, optional
        Cache file holding ``reading`` (:meth:`critline.batch.cache.ReadingCache.path`).
    """

    item: PhotoItem
    summary: PhotoReading
    overlay: str | None = None
    cached: bool = False
    source: str | None = field(default=None, repr=False)

    def __init__(self, item: PhotoItem, reading: PhotoReading, overlay: str | None = None,
                 cached: bool = False, source: str | os.PathLike | None = None):
        if source is not None:
            reading = summary_of(reading)
        object.__setattr__(self, "item", item)
        object.__setattr__(self, "summary", reading)
        object.__setattr__(self, "overlay", overlay)
        object.__setattr__(self, "cached", cached)
        object.__setattr__(self, "source", None if source is None else os.fspath(source))

    @property
    def reading(self) -> PhotoReading:
        """The full reading (from the cache file when only the summary is in memory).

        Should the file have gone or changed since it was written (it is the batch's own,
        under the output folder's lock), the summary is returned: edges, status and flags
        complete, profile and quality figures missing.
        """
        if self.source is None:
            return self.summary
        from critline.batch.cache import load_reading_file

        full = load_reading_file(self.source, self.summary.sha256, self.summary.photo)
        return self.summary if full is None else full

    @property
    def usable(self) -> bool:
        return self.summary.status in USABLE


def summary_of(reading: PhotoReading) -> PhotoReading:
    """The reading without what only a report's detail needs (profile, quality figures); its
    edges, status, reason, light, mode, quality flags and field circle are kept."""
    if reading.profile is None and not reading.quality.figures:
        return reading
    return replace(reading, profile=None, quality=Quality(flags=reading.quality.flags))


@dataclass(frozen=True)
class StoneResult:
    """A stone: its photos, the session analysis and the identification (None when impossible).

    ``notes`` are the batch's own plain-language remarks (the core's are in the analysis).
    """

    name: str
    photos: tuple[PhotoResult, ...]
    analysis: object | None = None          # critline.core.session.SessionAnalysis
    identification: object | None = None    # critline.core.matching.Identification
    notes: tuple[str, ...] = ()
    sg: float | None = None

    @property
    def usable(self) -> tuple[PhotoResult, ...]:
        return tuple(p for p in self.photos if p.usable)


def _core():
    """The identification core's entry points (imported late: the core has no image imports)."""
    from critline.core.matching import identify
    from critline.core.session import Observation, analyse_session

    return Observation, analyse_session, identify


#: quality flag the reader puts on a spot (distance) view of a curved stone
SPOT_FLAG = "spot_reading"


def is_spot_view(reading: PhotoReading) -> bool:
    return SPOT_FLAG in reading.quality.flags or any(e.kind == "spot" for e in reading.edges)


def observation(item: PhotoItem, reading: PhotoReading):
    """The core's ``Observation`` for one usable photo (a spot view gives a spot reading)."""
    Observation = _core()[0]
    spots = tuple((float(e.ri), float(e.uncertainty)) for e in reading.edges if e.kind == "spot")
    if spots:
        return Observation(edges=spots, spot=True, label=item.display)
    edges = tuple((float(e.ri), float(e.uncertainty))
                  for e in sorted(reading.stone_edges, key=lambda e: e.ri))
    return Observation(edges=edges, rotation=item.rotation, polariser=item.polariser,
                       over_limit=reading.status == "over_limit", label=item.display)


def spot_series_observation(photos, instrument, calibration, notes: list):
    """One spot observation from a series of spot views of a stone (the head moved between
    them): the reader's half-dark point of the series (:func:`critline.photo.spot.read_spot_series`).
    None when there is no series reading; the individual spot readings are used then."""
    try:
        from critline.photo.spot import read_spot_series
    except ImportError:
        return None
    try:
        series = read_spot_series([p.reading for p in photos], instrument, calibration)
    except Exception as exc:  # the per-photo spot readings still stand
        notes.append(f"spot series not combined ({type(exc).__name__}: {_one_line(exc)})")
        return None
    if series.status != "ok" or series.ri is None:
        return None
    Observation = _core()[0]
    notes.append(f"spot reading {series.ri:.2f} from the series of {len(photos)} spot photo(s) "
                 f"(where the spot is half dark; {len(series.used)} showed the split)")
    return Observation(edges=((float(series.ri), float(series.uncertainty)),), spot=True,
                       label=f"spot series of {len(photos)} photos")


def analyse_stone(group: StoneGroup, photos: tuple[PhotoResult, ...], *,
                  liquid_ri: float | None = None, instrument=None,
                  calibration=None) -> StoneResult:
    """Session analysis and identification of one stone from its photo results.

    Flat-facet photos become one observation each; spot views of a curved stone
    (several, as the head moves) are combined into one spot reading when the
    reader can, else each counts as a spot reading of its own.
    """
    notes: list[str] = []
    usable = [p for p in photos if p.usable]
    n_bad = len(photos) - len(usable)
    if n_bad:
        notes.append(f"{n_bad} of {len(photos)} photo(s) gave no reading (see problems)")
    if not usable:
        notes.append("no usable reading: nothing to analyse")
        return StoneResult(group.name, photos, None, None, tuple(notes), group.sg)
    facet = [p for p in usable if not is_spot_view(p.summary)]
    spot = [p for p in usable if is_spot_view(p.summary)]
    if facet and all(p.item.rotation is None for p in facet):
        notes.append("rotation not known for any photo: readings are shown in photo order and "
                     "the analysis relies on the edges alone")
    elif any(p.item.rotation is None for p in facet):
        k = sum(p.item.rotation is None for p in facet)
        notes.append(f"rotation not known for {k} photo(s)")
    settings = {p.item.polariser_setting for p in facet}
    if settings == {"unknown"}:
        notes.append("polariser setting not known for any photo")

    _, analyse_session, identify = _core()
    # the core refuses contradictory or impossible readings with an error; in a batch that is
    # a finding about this stone, said in its notes, and the other stones go on
    try:
        series = (spot_series_observation(spot, instrument, calibration, notes)
                  if len(spot) >= 2 else None)
        # a spot view without a split (wholly light spot) bounds nothing on its own
        chosen = facet + ([] if series is not None else
                          [p for p in spot if any(e.kind == "spot" for e in p.summary.edges)])
        observations = [observation(p.item, p.summary) for p in chosen]
        if series is not None:
            observations.append(series)
        analysis = analyse_session(observations, liquid_ri=liquid_ri)
    except (CritlineError, ValueError) as exc:
        notes.append(f"the readings could not be reduced: {_one_line(exc)}")
        return StoneResult(group.name, photos, None, None, tuple(notes), group.sg)
    except Exception as exc:  # a fault in the core must not lose the other stones' results
        notes.append(f"the readings could not be reduced (internal error {type(exc).__name__}: "
                     f"{_one_line(exc)})")
        return StoneResult(group.name, photos, None, None, tuple(notes), group.sg)
    try:
        identification = identify(analysis, sg=group.sg)
    except (CritlineError, ValueError) as exc:
        notes.append(f"no identification: {_one_line(exc)}")
        identification = None
    except Exception as exc:  # as above
        notes.append(f"no identification (internal error {type(exc).__name__}: {_one_line(exc)})")
        identification = None
    return StoneResult(group.name, photos, analysis, identification, tuple(notes), group.sg)


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__

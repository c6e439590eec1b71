"""From the readings of one stone to its analysis and ranked candidates.

The identification core (:mod:`critline.core`) sees numbers only: each usable
photo becomes an ``Observation`` (the stone edges' RIs with uncertainties, the
rotation and polariser if known, whether the stone was over the limit).  What
the core cannot decide (no rotation known, one polariser setting only, ...) it
says in its notes; this module adds what the batch itself knows (photos
rejected, rotation missing).
"""

from __future__ import annotations

from dataclasses import dataclass

from critline.batch.grouping import PhotoItem, StoneGroup
from critline.errors import CritlineError
from critline.readings import PhotoReading

#: statuses that carry information about the stone (``no_edge`` too: nothing on the scale)
USABLE = ("ok", "over_limit", "no_edge")


@dataclass(frozen=True)
class PhotoResult:
    """One photo of a stone and what was read from it."""

    item: PhotoItem
    reading: PhotoReading
    overlay: str | None = None
    cached: bool = False

    @property
    def usable(self) -> bool:
        return self.reading.status in USABLE


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


def observation(item: PhotoItem, reading: PhotoReading):
    """The core's ``Observation`` for one usable photo."""
    Observation = _core()[0]
    edges = tuple((float(e.ri), float(e.uncertainty))
                  for e in sorted(reading.stone_edges, key=lambda e: e.ri))
    return Observation(edges=edges, rotation=item.rotation, polariser=item.polariser,
                       over_limit=reading.status == "over_limit", label=item.display)


def analyse_stone(group: StoneGroup, photos: tuple[PhotoResult, ...], *,
                  liquid_ri: float | None = None) -> StoneResult:
    """Session analysis and identification of one stone from its photo results."""
    notes: list[str] = []
    usable = [p for p in photos if p.usable]
    n_bad = len(photos) - len(usable)
    if n_bad:
        notes.append(f"{n_bad} of {len(photos)} photo(s) gave no reading (see problems)")
    if not usable:
        notes.append("no usable reading: nothing to analyse")
        return StoneResult(group.name, photos, None, None, tuple(notes), group.sg)
    if all(p.item.rotation is None for p in usable):
        notes.append("rotation not known for any photo: readings are shown in photo order and "
                     "the analysis relies on the edges alone")
    elif any(p.item.rotation is None for p in usable):
        k = sum(p.item.rotation is None for p in usable)
        notes.append(f"rotation not known for {k} photo(s)")
    settings = {p.item.polariser_setting for p in usable}
    if settings == {"unknown"}:
        notes.append("polariser setting not known for any photo")

    _, analyse_session, identify = _core()
    # the core refuses contradictory or impossible readings with an error; in a batch that is
    # a finding about this stone, said in its notes, and the other stones go on
    try:
        observations = [observation(p.item, p.reading) for p in usable]
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

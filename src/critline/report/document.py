"""The ``critline.batch/1`` JSON document (design.md) of a batch.

The contract's fields come first for every stone (``stone``, ``photos``,
``ri_low``, ``ri_high``, ``birefringence``, ``uncertainty``,
``optic_character``, ``optic_sign``, ``over_limit``, ``candidates``,
``flags``); the document adds what a report needs to be followed: each
photo's reading, the notes saying what could not be decided, the tests that
would separate the leading candidates, and every problem file.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator

from critline import __version__, cautions

SCHEMA = "critline.batch/1"
#: candidates listed per stone (the rest of the table scored lower)
MAX_CANDIDATES = 6


def r4(x):
    """RI-like value rounded to four decimals; None for missing or not finite."""
    if x is None:
        return None
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return round(x, 4) if math.isfinite(x) else None


def _strs(values) -> list[str]:
    return [str(v) for v in (values or ())]


def candidate_name(c) -> str:
    """The material's name of a candidate (the core gives a Material with a ``key``)."""
    material = getattr(c, "material", c)
    return str(getattr(material, "key", material))


def leading_candidate(identification):
    cands = tuple(getattr(identification, "candidates", ()) or ())
    return cands[0] if cands else None


def candidate_json(c) -> dict:
    return {
        "material": candidate_name(c),
        "aliases": _strs(getattr(c, "aliases", ())),
        "score": None if getattr(c, "score", None) is None else round(float(c.score), 3),
        "agrees": _strs(getattr(c, "agrees", ())),
        "conflicts": _strs(getattr(c, "conflicts", ())),
    }


def reading_json(photo) -> dict:
    """One photo of a stone: how it was taken and what was read (``read/1`` fields)."""
    item, reading = photo.item, photo.reading
    d = reading.to_json()
    d["rotation"] = item.rotation
    d["polariser"] = item.polariser_setting
    d["cached"] = photo.cached
    return d


def stone_json(stone) -> dict:
    a, ident = stone.analysis, stone.identification
    used = stone.usable
    d = {
        "stone": stone.name,
        "photos": len(stone.photos),
        "photos_used": len(used),
        "ri_low": r4(getattr(a, "ri_low", None)),
        "ri_high": r4(getattr(a, "ri_high", None)),
        "birefringence": r4(getattr(a, "birefringence", None)),
        "uncertainty": r4(getattr(a, "uncertainty", None)),
        "optic_character": getattr(a, "optic_character", None) or "undetermined",
        "optic_sign": getattr(a, "optic_sign", None),
        "over_limit": bool(getattr(a, "over_limit", False)),
        "candidates": [],
        "flags": _strs(getattr(a, "flags", ())),
    }
    if a is None:
        d["flags"].append("not_analysed" if used else "no_readings")
    d["birefringence_uncertainty"] = r4(getattr(a, "birefringence_uncertainty", None))
    d["beta"] = r4(getattr(a, "beta", None))
    d["spot_ri"] = r4(getattr(a, "spot_ri", None))
    d["sg"] = stone.sg
    d["notes"] = list(stone.notes) + _strs(getattr(a, "notes", ()))
    if ident is not None:
        d["candidates"] = [candidate_json(c) for c in tuple(ident.candidates)[:MAX_CANDIDATES]]
        d["separating_tests"] = _strs(getattr(ident, "separating_tests", ()))
        groups = tuple(getattr(ident, "groups", ()) or ())
        d["leading_group"] = _strs(groups[0]) if groups else []
        d["notes"] += _strs(getattr(ident, "notes", ()))
    else:
        d["separating_tests"] = []
        d["leading_group"] = []
    d["readings"] = [reading_json(p) for p in stone.photos]
    return d


def _document(result, stones) -> dict:
    return {
        "schema": SCHEMA,
        "source": result.source,
        "grouping": result.grouping,
        "calibration": result.calibration_id,
        "instrument": result.instrument.to_dict(),
        "critline": __version__,
        "counts": dict(result.counts),
        "stones": stones,
        "problems": [p.to_json() for p in result.problems],
        "cautions": list(cautions.ALL),
    }


def batch_document(result) -> dict:
    """The ``critline.batch/1`` dict of a :class:`critline.batch.BatchResult`."""
    return _document(result, [stone_json(s) for s in result.stones])


#: stands for the stones in the encoded frame of the document (no file name or text holds it:
#: JSON writes the control characters as \u0000 escapes)
_STONES_MARK = "\x00critline stones\x00"


def iter_batch_json(result, *, indent: int | None = 1) -> Iterator[str]:
    """The text of ``json.dumps(batch_document(result), indent=indent, ensure_ascii=False)``,
    in pieces, one stone at a time.

    A batch of thousands of photos need not hold its whole document (every reading's
    quality figures) in memory to write it: only one stone's part exists at a time.
    The pieces join to exactly the bytes ``json.dumps`` gives (checked by the tests):
    the frame is encoded with a marker in place of the stone list, and each stone is
    encoded on its own and indented to its depth (JSON text holds no raw line breaks
    inside strings, so indenting after every line break is exact).
    """
    frame = json.dumps(_document(result, _STONES_MARK), indent=indent, ensure_ascii=False)
    marker = json.dumps(_STONES_MARK, ensure_ascii=False)
    head, tail = frame.split(marker)
    yield head
    if not result.stones:
        yield "[]"
    else:
        # the stone list sits at depth 1 of the document: items at depth 2
        inner = None if indent is None else "\n" + " " * (2 * indent)
        yield "["
        for i, stone in enumerate(result.stones):
            text = json.dumps(stone_json(stone), indent=indent, ensure_ascii=False)
            if inner is None:
                yield (", " if i else "") + text
            else:
                yield ("," if i else "") + inner + text.replace("\n", inner)
        yield "]" if indent is None else "\n" + " " * indent + "]"
    yield tail

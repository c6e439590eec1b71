"""The batch as one CSV table: one ``stone`` row per stone, then one ``reading`` row per photo.

Both kinds of row share the columns; a column that does not apply to a row is
empty.  RI values have four decimals.

Text that a spreadsheet would take for a formula (a cell starting with ``=``,
``+``, ``-``, ``@``, a tab or a carriage return; file and stone names come
from the user's disk) gets a leading apostrophe, as the OWASP "CSV Injection"
guidance recommends; a cell that is a number (``-0.0030``, a rotation of
``-30``) is left as it is, and so is a lone sign character (the optic sign
``+`` / ``-``): an operator with nothing after it calls nothing.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator

from critline.report.document import candidate_name, r4

COLUMNS = (
    "row", "stone", "photo", "rotation", "polariser", "status",
    "ri_low", "ri_high", "birefringence", "uncertainty", "optic_character", "optic_sign",
    "over_limit", "leading_candidate", "score", "edge_1", "edge_1_uncertainty",
    "edge_2", "edge_2_uncertainty", "liquid_edge", "spot", "spot_uncertainty", "light", "flags",
    "reason",
)


#: first characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection")
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
#: cells left as they are although they start with a formula character: the optic sign
LONE_SIGNS = ("+", "-")


def _is_number(text: str) -> bool:
    if text != text.strip():
        return False
    try:
        float(text)
    except ValueError:
        return False
    return True


def guard_cell(text: str) -> str:
    """``text`` with a leading apostrophe when a spreadsheet would read it as a formula;
    numbers (a negative one too) unchanged."""
    if text.startswith(FORMULA_START) and not _is_number(text) and text not in LONE_SIGNS:
        return "'" + text
    return text


def _fmt(x) -> str:
    if x is None:
        return ""
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, float):
        return f"{x:.4f}"
    return str(x)


def batch_rows(result) -> list[dict]:
    return [row for stone in result.stones for row in stone_rows(stone)]


def stone_rows(stone) -> list[dict]:
    """The ``stone`` row of one stone, then one ``reading`` row per photo."""
    rows = []
    a, ident = stone.analysis, stone.identification
    lead = tuple(ident.candidates)[0] if ident is not None and ident.candidates else None
    rows.append({
        "row": "stone", "stone": stone.name, "photo": f"{len(stone.usable)}/{len(stone.photos)} used",
        "ri_low": r4(getattr(a, "ri_low", None)), "ri_high": r4(getattr(a, "ri_high", None)),
        "birefringence": r4(getattr(a, "birefringence", None)),
        "uncertainty": r4(getattr(a, "uncertainty", None)),
        "optic_character": getattr(a, "optic_character", None) or "undetermined",
        "optic_sign": getattr(a, "optic_sign", None) or "",
        "over_limit": bool(getattr(a, "over_limit", False)),
        "leading_candidate": "" if lead is None else candidate_name(lead),
        "score": None if lead is None else f"{float(lead.score):.3f}",
        "flags": " ".join(getattr(a, "flags", ()) or ()),
    })
    for p in stone.photos:
        r = p.summary  # what the table shows is all in the summary
        stone_edges = sorted(r.stone_edges, key=lambda e: e.ri)
        liquid = [e for e in r.edges if e.kind == "liquid"]
        row = {
            "row": "reading", "stone": stone.name, "photo": p.item.display,
            "rotation": None if p.item.rotation is None else f"{p.item.rotation:g}",
            "polariser": p.item.polariser_setting,
            "status": r.status, "light": r.light,
            "flags": " ".join(r.quality.flags), "reason": r.reason or "",
            "liquid_edge": r4(liquid[0].ri) if liquid else None,
        }
        spots = [e for e in r.edges if e.kind == "spot"]
        if spots:
            row["spot"], row["spot_uncertainty"] = r4(spots[0].ri), r4(spots[0].uncertainty)
        for k, e in enumerate(stone_edges[:2], start=1):
            row[f"edge_{k}"] = r4(e.ri)
            row[f"edge_{k}_uncertainty"] = r4(e.uncertainty)
        rows.append(row)
    return rows


def batch_csv(result) -> str:
    """CSV text of a :class:`critline.batch.BatchResult`."""
    return "".join(iter_batch_csv(result))


def iter_batch_csv(result) -> Iterator[str]:
    """:func:`batch_csv` in pieces: the header, then one stone's rows at a time."""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=COLUMNS, lineterminator="\n")
    writer.writeheader()
    yield buf.getvalue()
    for stone in result.stones:
        buf.seek(0)
        buf.truncate()
        for row in stone_rows(stone):
            writer.writerow({k: guard_cell(_fmt(row.get(k))) for k in COLUMNS})
        yield buf.getvalue()

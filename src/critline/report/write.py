"""Writing a batch's reports next to each other, never over an earlier one unless told.

The three files share a name: ``report.json``, ``report.csv``, ``report.html``.
When any of them exists already and ``overwrite`` is False, the new set goes
under the first free numbered name (``report-2.*``, ``report-3.*``, ...) and
the caller says so; the earlier reports are kept.  Every file is written
atomically (a temporary file, then a rename), and the numbered name is claimed
with a no-overwrite link, so two runs at once cannot take the same name.

Each file is written in pieces, one stone at a time (:func:`iter_batch_json`,
:func:`iter_batch_csv`, :func:`iter_batch_html`): the memory a report takes does
not grow with the number of photos (the HTML page embeds every photo).
"""

from __future__ import annotations

import json
from pathlib import Path

from critline.errors import UsageError
from critline.fileio import atomic_write_pieces
from critline.report.document import iter_batch_json
from critline.report.html import generated_now, iter_batch_html
from critline.report.table import iter_batch_csv

SUFFIXES = (".json", ".csv", ".html")


def free_stem(out_dir: Path, stem: str = "report") -> str:
    """``stem`` if none of its files exist in ``out_dir``, else ``stem-2``, ``stem-3``, ..."""
    n = 1
    while True:
        name = stem if n == 1 else f"{stem}-{n}"
        if not any((out_dir / f"{name}{s}").exists() for s in SUFFIXES):
            return name
        n += 1


def _json_pieces(result, document: dict | None):
    if document is not None:
        yield json.dumps(document, indent=1, ensure_ascii=False)
    else:
        yield from iter_batch_json(result, indent=1)
    yield "\n"


def write_reports(result, out_dir: str | Path | None = None, *, overwrite: bool = False,
                  stem: str = "report", document: dict | None = None) -> dict[str, Path]:
    """Write JSON, CSV and HTML reports of a batch; returns ``{"json": path, ...}``.

    ``document``, when given, is the batch's ``critline.batch/1`` dict already made
    (written as it is); else the JSON is encoded one stone at a time.
    """
    out_dir = Path(out_dir if out_dir is not None else result.out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    generated = generated_now()  # the page's time: the same for every attempt below
    makers = {
        "json": lambda: _json_pieces(result, document),
        "csv": lambda: iter_batch_csv(result),
        "html": lambda: iter_batch_html(result, generated=generated),
    }
    for _attempt in range(20):
        name = stem if overwrite else free_stem(out_dir, stem)
        paths = {k: out_dir / f"{name}.{k}" for k in makers}
        try:
            # the JSON claims the name (no-overwrite link), the rest follow it
            atomic_write_pieces(paths["json"], makers["json"](), overwrite=overwrite)
        except UsageError:
            if overwrite:
                raise
            continue  # another run took this name meanwhile
        for k in ("csv", "html"):
            atomic_write_pieces(paths[k], makers[k](), overwrite=True)
        return paths
    raise UsageError(f"{out_dir}: could not find a free report name")

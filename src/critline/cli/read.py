"""`critline read`: RI readings from eyepiece photos (a thin shell over critline.photo.read_photo).

Default output is a table, one row per photo; ``--json`` prints exactly one
``critline.read/1`` document on stdout (diagnostics go to stderr).  Exit code
0 when every photo gave a result (including ``no_edge`` and ``over_limit``),
3 when at least one photo was rejected, 2 for usage errors.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import typer

from critline import cautions
from critline.cli import app
from critline.errors import EXIT_REJECTED, UsageError


def _load_instrument(path: Path | None):
    from critline.instrument import InstrumentError, load_instrument

    try:
        return load_instrument(path)
    except InstrumentError as exc:
        raise UsageError(str(exc)) from None


def _load_calibration(path: Path | None):
    if path is None:
        return None
    try:
        from critline.calibration import load_calibration
    except ImportError:
        raise UsageError(f"{path}: calibrations cannot be loaded by this installation "
                         "(critline.calibration.load_calibration is missing)") from None
    return load_calibration(path)  # raises a one-line CritlineError when the file is bad


def _fmt_edges(reading) -> tuple[str, str]:
    values, uncs = [], []
    for e in reading.edges:
        tag = "" if e.kind == "stone" else f" ({e.kind})"
        values.append(f"{e.ri:.4f}{tag}")
        uncs.append(f"{e.uncertainty:.4f}")
    return "\n".join(values) or "-", "\n".join(uncs) or "-"


def _print_table(readings, calibration_id) -> None:
    from rich.console import Console
    from rich.table import Table

    title = "Readings (RI at 589.3 nm, " + (f"calibration {calibration_id})" if calibration_id
                                           else "nominal scale values)")
    table = Table(title=title, title_justify="left")
    table.add_column("photo", overflow="fold")
    table.add_column("status")
    table.add_column("RI", justify="right")
    table.add_column("+-", justify="right")
    table.add_column("light")
    table.add_column("flags / reason")
    for r in readings:
        values, uncs = _fmt_edges(r)
        note = r.reason or ", ".join(r.quality.flags) or "-"
        if r.mode == "field_frame":
            note = "field-frame reading; " + note
        table.add_row(r.photo, r.status, values, uncs, r.light if r.status != "rejected" else "-", note)
    console = Console()
    console.print(table)
    console.print("[dim]Uncertainties are one standard uncertainty. " + cautions.EVIDENCE + "[/dim]")


@app.command(epilog=cautions.HELP_EPILOG)
def read(
    photos: list[Path] = typer.Argument(..., metavar="PHOTO...", help="Eyepiece photos (JPEG, PNG, TIFF, HEIC)."),
    instrument: Path = typer.Option(None, "--instrument", metavar="FILE",
                                    help="Instrument file (TOML) describing the scale; default 1.30-1.80."),
    calibration: Path = typer.Option(None, "--calibration", metavar="FILE",
                                     help="Calibration file: readings through it instead of nominal values."),
    overlay: Path = typer.Option(None, "--overlay", metavar="DIR",
                                 help="Write each photo marked up as evidence into DIR (never overwrites)."),
    as_json: bool = typer.Option(False, "--json", help="Print one critline.read/1 JSON document."),
) -> None:
    """Read shadow edges from eyepiece photos into refractive index readings."""
    from critline.photo import read_photo

    inst = _load_instrument(instrument)
    cal = _load_calibration(calibration)
    if overlay is not None and overlay.exists() and not overlay.is_dir():
        raise UsageError(f"{overlay}: --overlay must be a folder")
    readings = []
    for photo in photos:
        reading = read_photo(photo, instrument=inst, calibration=cal, overlay_dir=overlay)
        readings.append(reading)
        if reading.status == "rejected":
            print(f"critline: {photo}: rejected: {reading.reason}", file=sys.stderr)
    cal_id = getattr(cal, "id", None)
    if as_json:
        doc = {"schema": "critline.read/1", "calibration": cal_id,
               "photos": [r.to_json() for r in readings]}
        typer.echo(json.dumps(doc, indent=1))
    else:
        _print_table(readings, cal_id)
    if any(r.status == "rejected" for r in readings):
        raise typer.Exit(EXIT_REJECTED)

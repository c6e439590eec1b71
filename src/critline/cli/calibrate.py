"""`critline calibrate`: fit the instrument-and-phone setup on reference stones."""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path

import typer

from critline import cautions
from critline.cli import app
from critline.errors import UsageError


def _load_instrument(path):
    from critline.instrument import InstrumentError, load_instrument

    try:
        return load_instrument(path)
    except InstrumentError as exc:
        raise UsageError(str(exc)) from None


def _table(cal, fit, drift, out: Path) -> str:
    lines = [
        f"calibration {cal.id}  ({cal.light} light, "
        f"{sum(not r.excluded for r in cal.references)} reference edges)",
        f"model      {cal.model_reason}",
        f"correction offset {cal.offset:+.4f} at {cal.scale_map.centre:.4f}, "
        f"gain {100 * cal.gain_error:+.2f} %",
        f"residuals  RMS {cal.residual_rms:.4f}"
        + (f", predicted when left out RMS {cal.loo_rms:.4f}" if cal.loo_rms is not None else "")
        + f"; valid {cal.valid_range[0]:.4f} to {cal.valid_range[1]:.4f}",
        ("field frame " + (f"{cal.field_map.kind}, left-out RMS {cal.field_loo_rms:.4f} (lower precision)"
                           if cal.field_map is not None and cal.field_loo_rms is not None
                           else (cal.field_map.kind if cal.field_map is not None else cal.field_reason))),
        "",
    ]
    width = max([len("photo")] + [len(r.photo) for r in cal.references])
    lines.append(f"{'photo':<{width}}  {'reference':<16} {'known':>7} {'measured':>8} "
                 f"{'residual':>8} {'left out':>8}")
    for r in cal.references:
        lo = f"{r.loo_residual:+.4f}" if r.loo_residual is not None else "-"
        mark = "  excluded" if r.excluded else ""
        lines.append(f"{r.photo:<{width}}  {r.material[:16]:<16} {r.known_ri:7.4f} {r.measured_ri:8.4f} "
                     f"{r.residual:+8.4f} {lo:>8}{mark}")
    if drift is not None:
        lines.append("")
        lines.append(f"drift since {drift.previous_id} ({drift.previous_created}): largest shift "
                     f"{drift.max_shift:+.4f} at {drift.max_shift_at:.4f}"
                     + ("  ** beyond 0.002 **" if drift.flagged else " (within 0.002)"))
        for p in drift.at_references:
            lines.append(f"  at {p.ri:.4f} {p.label[:24]:<24} {p.shift:+.4f}")
        lines.extend(f"  {n}" for n in drift.notes)
    if cal.warnings:
        lines.append("")
        lines.extend(f"warning: {w}" for w in cal.warnings)
    lines.append("")
    lines.append(f"written {out}")
    return "\n".join(lines)


@app.command(epilog=cautions.HELP_EPILOG)
def calibrate(
    manifest: Path = typer.Argument(..., help="CSV with header photo,known_ri[,material]; photo paths "
                                    "relative to it; known_ri a number or a key of calibration/references.csv."),
    out: Path = typer.Option(..., "--out", help="Calibration file to write (TOML)."),
    previous: Path | None = typer.Option(None, "--previous", help="Earlier calibration file, or a folder "
                                         "of them (the latest made before this one), to report drift."),
    exclude: list[str] = typer.Option([], "--exclude", help="Leave this photo out of the fit "
                                      "(repeatable); it stays in the record."),
    force: bool = typer.Option(False, "--force", help="Fit even when a reference disagrees with the others."),
    setup: str | None = typer.Option(None, "--setup", help='Setup description, e.g. "instrument=bench A; '
                                     'phone=back camera; liquid=1.79; temperature=21 C".'),
    instrument: Path | None = typer.Option(None, "--instrument", help="Instrument file (TOML) of the scale."),
    light: str | None = typer.Option(None, "--light", help="monochromatic or white, when the photos "
                                     "do not tell."),
    model: str | None = typer.Option(None, "--model", help="Force offset, offset+gain or smooth instead "
                                     "of choosing by the evidence."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace an existing calibration file."),
    as_json: bool = typer.Option(False, "--json", help="Print one critline.calibration/1 JSON document."),
) -> None:
    """Fit the map from scale position to RI on photos of reference stones and store it.

    Bad input (too few references, duplicate photos, known RIs outside the scale, references all at one end, a reference photo rejected or over the limit, a disagreeing reference) stops with one line and exit code 2; nothing is written.
    """
    from critline.calibration import compare, find_previous, write_calibration
    from critline.calibration.manifest import calibrate_manifest, parse_setup

    if out.is_dir():
        raise UsageError(f"{out}: is a folder; give a file name")
    if out.exists() and not overwrite:
        raise UsageError(f"{out}: already exists (refusing to overwrite; pass --overwrite)")
    inst = _load_instrument(instrument)
    old = None
    if previous is not None:
        old = find_previous(previous, before=datetime.now().astimezone().isoformat(), skip=out)
    info = parse_setup(setup)
    if instrument is not None:
        info.setdefault("instrument_file", str(instrument))
    result = calibrate_manifest(manifest, instrument=inst, setup=info, light=light, exclude=exclude,
                                force=force, model=model)
    cal = result.calibration
    drift = compare(cal, old) if old is not None else None
    write_calibration(cal, out, overwrite=overwrite)
    if as_json:
        doc = cal.to_json()
        doc["drift"] = drift.to_json() if drift is not None else None
        doc["written"] = str(out)
        typer.echo(json.dumps(doc, indent=2))
    else:
        typer.echo(_table(cal, result.fit, drift, out))

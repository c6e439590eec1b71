"""`critline batch` and `critline watch`: a thin shell over :mod:`critline.batch` and :mod:`critline.report`."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from critline import cautions
from critline.cli import app
from critline.errors import EXIT_REJECTED, CritlineError, UsageError

_OUT_HELP = ("Folder for the reports, the result cache and the marked-up photos "
             "(default: ./<folder name>-critline).")


def default_out(source: Path) -> Path:
    name = source.resolve().name or "batch"
    if source.suffix.lower() == ".csv":
        name = source.stem
    return Path(f"{name}-critline")


def load_setup(calibration: Path | None, instrument: Path | None):
    """The instrument and calibration files, or a one-line usage error naming the file."""
    from critline.instrument import InstrumentError, load_instrument

    try:
        inst = load_instrument(instrument)
    except InstrumentError as exc:
        raise UsageError(str(exc)) from None
    cal = None
    if calibration is not None:
        try:
            from critline.calibration import load_calibration
        except ImportError as exc:
            raise CritlineError(f"calibration support is not available ({exc})") from None
        try:
            cal = load_calibration(calibration)
        except CritlineError:
            raise
        except Exception as exc:  # the calibration module's own error types
            text = str(exc)
            raise UsageError(text if str(calibration) in text else f"{calibration}: {text}") from None
        inst = instrument_for(cal, inst, explicit=instrument is not None, calibration_path=calibration)
    return inst, cal


def instrument_for(cal, inst, *, explicit: bool, calibration_path):
    """The calibration's own instrument unless one was given; a given one must have the same scale."""
    from dataclasses import fields

    from critline.instrument import Instrument

    described = getattr(cal, "instrument", None)
    if not isinstance(described, dict) or not described:
        return inst
    known = {f.name for f in fields(Instrument)}
    try:
        cal_inst = Instrument(**{k: v for k, v in described.items() if k in known})
    except TypeError:
        return inst
    if not explicit:
        return cal_inst
    same = all(abs(getattr(inst, k) - getattr(cal_inst, k)) < 1e-9 for k in ("first", "last", "step"))
    if not same:
        raise UsageError(f"{calibration_path}: made for a {cal_inst.first:g}-{cal_inst.last:g} scale "
                         f"(step {cal_inst.step:g}), but the instrument file describes "
                         f"{inst.first:g}-{inst.last:g} (step {inst.step:g})")
    return inst


def _stderr_console():
    from rich.console import Console

    return Console(stderr=True)


def print_summary(result, console) -> None:
    from rich.table import Table

    from critline.report.document import candidate_name, r4

    table = Table(title=f"{len(result.stones)} stone(s) from {result.source}", title_justify="left")
    for col in ("stone", "photos", "RI range", "birefringence", "character", "sign", "leading candidate"):
        table.add_column(col)
    for s in result.stones:
        a, ident = s.analysis, s.identification
        lead = tuple(ident.candidates)[0] if ident is not None and tuple(ident.candidates) else None
        lo, hi, bi = (r4(getattr(a, k, None)) for k in ("ri_low", "ri_high", "birefringence"))
        if getattr(a, "over_limit", False):
            ri = "over the limit"
        elif lo is None:
            ri = "-"
        else:
            ri = f"{lo:.4f} - {hi:.4f}" if hi is not None else f"{lo:.4f}"
        u = r4(getattr(a, "uncertainty", None))
        if u is not None and lo is not None and not getattr(a, "over_limit", False):
            ri += f" (± {u:.4f})"
        table.add_row(s.name, f"{len(s.usable)}/{len(s.photos)}", ri,
                      "-" if bi is None else f"{bi:.4f}",
                      getattr(a, "optic_character", None) or "undetermined",
                      getattr(a, "optic_sign", None) or "?",
                      "-" if lead is None else f"{candidate_name(lead)} ({float(lead.score):.2f})")
    console.print(table)


def report_problems(problems) -> None:
    for p in problems:
        print(f"critline: {p.line()}", file=sys.stderr)


@app.command(epilog=cautions.HELP_EPILOG)
def batch(
    ctx: typer.Context,
    folder: Path = typer.Argument(..., help="Folder with one subfolder per stone (photos directly in it: "
                                  "one stone), or a manifest .csv with the columns stone,photo and "
                                  "optionally rotation,polariser,sg (paths relative to the manifest)."),
    calibration: Path | None = typer.Option(None, "--calibration", help="Calibration file (from "
                                            "`critline calibrate`); without it readings are nominal scale values."),
    instrument: Path | None = typer.Option(None, "--instrument", help="Instrument file (TOML) describing the scale."),
    out: Path | None = typer.Option(None, "--out", help=_OUT_HELP),
    as_json: bool = typer.Option(False, "--json", help="Print the critline.batch/1 JSON document on stdout."),
    fresh: bool = typer.Option(False, "--fresh", help="Read every photo again, ignoring results cached by earlier runs."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace report.json/.csv/.html. Without it an "
                                   "earlier report is kept and the new one is written as report-2.*, report-3.*, ..."),
    workers: int | None = typer.Option(None, "--workers", min=1, help="Reading processes (default: all cores)."),
    no_overlays: bool = typer.Option(False, "--no-overlays", help="Skip the marked-up photos (quicker; the "
                                     "report then shows the photos as taken)."),
    name_pattern: str | None = typer.Option(None, "--name-pattern", help="Regular expression with named groups "
                                            "'rotation' and 'polariser' matched in file names (the default matches "
                                            "r030_pol0.jpg, r030_pol90.jpg, r030_none.jpg)."),
) -> None:
    """Read every photo of a folder of stones, analyse and identify each stone, and write reports.

    Photos are read in parallel and cached by content in the output folder, so a re-run reads only
    new photos. Writes report.json (critline.batch/1), report.csv (one row per stone and one per
    reading) and report.html (self-contained). Exit code 0: every photo gave a result; 3: at least
    one photo was rejected or unreadable (listed one per line on stderr and in the report); 2: usage.
    """
    from critline.batch import run_batch
    from critline.report import write_reports
    from critline.report.document import iter_batch_json

    inst, cal = load_setup(calibration, instrument)
    out_dir = out if out is not None else default_out(folder)
    from critline.batch.lock import hold_for_command

    hold_for_command(out_dir, ctx)  # one batch per output folder; released when the command ends
    console = _stderr_console()
    progress = None
    task_id = None

    def on_start(to_read, cached):
        nonlocal progress, task_id
        if to_read >= 2 and console.is_terminal:
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                Progress,
                TextColumn,
                TimeRemainingColumn,
            )

            progress = Progress(TextColumn("reading photos"), BarColumn(), MofNCompleteColumn(),
                                TimeRemainingColumn(), console=console, transient=True)
            progress.start()
            task_id = progress.add_task("read", total=to_read)

    def on_progress(done, total):
        if progress is not None:
            progress.update(task_id, completed=done)

    try:
        result = run_batch(folder, calibration=cal, instrument=inst, out_dir=out_dir, workers=workers,
                           fresh=fresh, name_pattern=name_pattern, overlays=not no_overlays, on_start=on_start,
                           on_progress=on_progress)
    except KeyboardInterrupt:
        if progress is not None:
            progress.stop()
            progress = None
        print(f"critline: interrupted; the photos read so far are kept in {out_dir / 'cache'} "
              "(run the same command again to read only the rest)", file=sys.stderr)
        raise typer.Exit(130) from None
    finally:
        if progress is not None:
            progress.stop()
    # written one stone at a time: the reports' memory does not grow with the number of photos
    paths = write_reports(result, out_dir, overwrite=overwrite)
    report_problems(result.problems)
    if paths["json"].stem != "report":
        print(f"critline: earlier report kept in {out_dir}; this one is {paths['html'].name} "
              f"(pass --overwrite to replace)", file=sys.stderr)
    c = result.counts
    print(f"critline: {c['photos']} photo(s): {c['read']} read, {c['cached']} from cache, "
          f"{c['rejected']} without a result; reports: {', '.join(str(p) for p in paths.values())}",
          file=sys.stderr)
    if as_json:
        for piece in iter_batch_json(result, indent=None):  # json.dumps(document), in pieces
            sys.stdout.write(piece)
        sys.stdout.write("\n")
    else:
        from rich.console import Console

        print_summary(result, Console())
    if result.exit_code:
        raise typer.Exit(result.exit_code)


@app.command(epilog=cautions.HELP_EPILOG)
def watch(
    ctx: typer.Context,
    folder: Path = typer.Argument(..., help="Folder the phone syncs into; each subfolder is one stone."),
    calibration: Path | None = typer.Option(None, "--calibration", help="Calibration file (from `critline calibrate`)."),
    instrument: Path | None = typer.Option(None, "--instrument", help="Instrument file (TOML) describing the scale."),
    out: Path | None = typer.Option(None, "--out", help=_OUT_HELP),
    interval: float = typer.Option(2.0, "--interval", min=0.05, help="Seconds between looks at the folder."),
    max_idle: float | None = typer.Option(None, "--max-idle", min=0.0, help="Stop after this many seconds "
                                          "without a new photo (default: run until Ctrl-C)."),
    once: bool = typer.Option(False, "--once", help="Read what is there (once its size is stable) and stop."),
    no_overlays: bool = typer.Option(False, "--no-overlays", help="Skip the marked-up photos (quicker)."),
    name_pattern: str | None = typer.Option(None, "--name-pattern", help="As for `critline batch`."),
    overwrite: bool = typer.Option(False, "--overwrite", help="As for `critline batch` (final report)."),
) -> None:
    """Read each new photo as it lands in a folder and show the running summary of its stone.

    A photo is read once its size has stopped changing between two looks. A new subfolder starts a
    new stone. Results are cached in the output folder as they come, and watch-summary.json there
    is rewritten after every photo; on Ctrl-C (or --max-idle / --once) the full report is written
    as for `critline batch`. Exit code 3 when a photo was rejected or unreadable.
    """
    from critline.batch.watch import watch_folder

    if not folder.is_dir():
        raise UsageError(f"{folder}: not a folder")
    inst, cal = load_setup(calibration, instrument)
    out_dir = out if out is not None else default_out(folder)
    from critline.batch.lock import hold_for_command

    hold_for_command(out_dir, ctx)
    code = watch_folder(folder, calibration=cal, instrument=inst, out_dir=out_dir, interval=interval,
                        max_idle=max_idle, once=once, name_pattern=name_pattern, overwrite=overwrite,
                        overlays=not no_overlays,
                        echo=lambda text: print(text, flush=True))
    if code:
        raise typer.Exit(code if code else EXIT_REJECTED)

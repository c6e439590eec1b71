"""`critline identify`: rank the materials that fit typed-in readings.

A thin shell over :func:`critline.core.matching.identify`.  Values are parsed
here (not by the option parser) so that every bad value becomes one line on
stderr and exit code 2.
"""

from __future__ import annotations

import json
import math

import typer

from critline import cautions
from critline.cli import app
from critline.errors import UsageError

_SIGNS = {"+": "+", "positive": "+", "pos": "+", "-": "-", "negative": "-", "neg": "-"}
_CHARACTERS = ("isotropic", "uniaxial", "biaxial")


def _number(text: str | None, what: str) -> float | None:
    if text is None:
        return None
    try:
        value = float(str(text).strip())
    except ValueError:
        raise UsageError(f"{what}: {text!r} is not a number") from None
    if not math.isfinite(value):
        raise UsageError(f"{what}: {text!r} is not a finite number")
    return value


def _character(text: str | None) -> str | None:
    if text is None:
        return None
    value = text.strip().lower()
    if value not in _CHARACTERS:
        raise UsageError(f"--character: {text!r} is not one of {', '.join(_CHARACTERS)}")
    return value


def _sign(text: str | None) -> str | None:
    if text is None:
        return None
    value = _SIGNS.get(text.strip().lower())
    if value is None:
        raise UsageError(f"--sign: {text!r} is not '+' or '-'")
    return value


def _print_table(result, ris, console) -> None:
    from rich.table import Table

    measured = result.measured
    parts = []
    if measured.get("ri_low") is not None:
        lo, hi = measured["ri_low"], measured.get("ri_high")
        parts.append(f"RI {lo:.4f}" + (f" - {hi:.4f}" if hi is not None and hi != lo else ""))
    if measured.get("birefringence") is not None and ris and len(ris) > 1:
        parts.append(f"birefringence {measured['birefringence']:.4f}")
    for key, label in (("optic_character", "character"), ("optic_sign", "sign"), ("sg", "SG"),
                       ("spot_ri", "spot")):
        if measured.get(key) is not None:
            parts.append(f"{label} {measured[key]}")
    if measured.get("over_limit"):
        parts.append(f"over the limit (> {measured['liquid_ri']:.3f})")
    table = Table(title="Materials that fit: " + ", ".join(parts), title_justify="left")
    table.add_column("tie", justify="right")
    table.add_column("material")
    table.add_column("varieties")
    table.add_column("score", justify="right")
    table.add_column("conflicts")
    group_of = {key: i + 1 for i, group in enumerate(result.groups) for key in group}
    for c in result.candidates:
        aliases = ", ".join(c.aliases[:4]) + (" ..." if len(c.aliases) > 4 else "")
        table.add_row(str(group_of.get(c.key, "")), c.key, aliases, f"{c.score:.3f}",
                      "; ".join(c.conflicts) or "-")
    console.print(table)
    if result.separating_tests:
        console.print("[bold]Tests that would separate the leading candidates[/bold]")
        for test in result.separating_tests:
            console.print(f"  - {test}")
    for note in result.notes:
        if not note.startswith("Refractive index alone"):  # said by the caution below
            console.print(note)
    console.print(f"[dim]{cautions.EVIDENCE}[/dim]")


@app.command(epilog=cautions.HELP_EPILOG)
def identify(
    ri: list[str] = typer.Option(
        None, "--ri", metavar="RI",
        help="A refractive index reading at 589.3 nm; repeat for each edge (lowest and highest are used).",
    ),
    sg: str = typer.Option(None, "--sg", metavar="SG", help="Specific gravity."),
    spot: str = typer.Option(None, "--spot", metavar="RI", help="Spot (distance) reading, +-0.01."),
    over_limit: bool = typer.Option(
        False, "--over-limit", help="Only the liquid line was seen: the stone (or one ray) is above the liquid."
    ),
    character: str = typer.Option(None, "--character", help="Optic character: isotropic, uniaxial or biaxial."),
    sign: str = typer.Option(None, "--sign", help="Optic sign: + or -."),
    liquid: str = typer.Option(
        None, "--liquid", metavar="RI", help="Contact liquid index (default 1.79, the default instrument's)."
    ),
    uncertainty: str = typer.Option(
        None, "--uncertainty", metavar="U",
        help="Standard uncertainty of each --ri reading (default 0.002).",
    ),
    as_json: bool = typer.Option(False, "--json", help="Print one critline.identify/1 JSON document."),
) -> None:
    """Rank the materials whose properties fit the readings, and say what would separate them."""
    from critline.core.matching import TYPED_UNCERTAINTY
    from critline.core.matching import identify as run_identify

    ris = [_number(text, "--ri") for text in (ri or [])]
    sg_value = _number(sg, "--sg")
    spot_value = _number(spot, "--spot")
    liquid_value = _number(liquid, "--liquid")
    u = _number(uncertainty, "--uncertainty")
    u = TYPED_UNCERTAINTY if u is None else u
    if spot_value is not None and over_limit:
        raise UsageError("--spot and --over-limit contradict each other: a spot reading is on the scale")
    if not ris and spot_value is None and not over_limit:
        raise UsageError("no readings: give --ri (repeatable), --spot or --over-limit")
    result = run_identify(
        ris=ris,
        sg=sg_value,
        spot=spot_value,
        over_limit=over_limit,
        character=_character(character),
        sign=_sign(sign),
        liquid_ri=liquid_value,
        uncertainty=u,
    )
    if as_json:
        typer.echo(json.dumps(result.to_json(), indent=2))
        return
    from rich.console import Console

    _print_table(result, ris, Console())

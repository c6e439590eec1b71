"""`critline synth`: render synthetic eyepiece photos with ground truth, and the demo samples."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from critline import cautions
from critline.cli import app
from critline.errors import UsageError

synth_app = typer.Typer(
    help="Synthesize eyepiece photos with known answers (physics-based), and the demo samples.\n\n"
    + cautions.HELP_EPILOG,
    no_args_is_help=True,
    add_completion=False,
)
app.add_typer(synth_app, name="synth")


@synth_app.command("photo", epilog=cautions.HELP_EPILOG)
def photo(
    out: Path = typer.Argument(..., help="Image to write (.jpg .png .tif .heic); the truth goes beside it as .json."),
    seed: int = typer.Option(0, "--seed", help="Seed of the scene draw and of the noise."),
    ri: list[float] = typer.Option(None, "--ri", help="Stone ray index at 589.3 nm (give twice for a doubly refractive stone)."),
    no_stone: bool = typer.Option(False, "--no-stone", help="Nothing on the prism but contact liquid."),
    polariser: str = typer.Option(None, "--polariser", help="both | low | high: which ray the polariser passes."),
    light: str = typer.Option(None, "--light", help="sodium | white"),
    liquid: float = typer.Option(None, "--liquid", help="Contact liquid index at 589.3 nm."),
    instrument: Path = typer.Option(None, "--instrument", help="Instrument file (TOML) with the printed scale."),
    scale_offset: float = typer.Option(None, "--scale-offset", help="Mis-scaled instrument: true minus printed value at mid-scale."),
    scale_gain: float = typer.Option(None, "--scale-gain", help="Mis-scaled instrument: relative gain error of the printed scale."),
    megapixels: float = typer.Option(None, "--megapixels", min=0.05, max=60, help="Frame size."),
    clean: bool = typer.Option(False, "--clean", help="No noise, blur, tilt, dust, vignetting or phone processing."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace existing files."),
    as_json: bool = typer.Option(False, "--json", help="Print the truth as JSON."),
) -> None:
    """Render one photo: a random scene from the seed, with the given parts fixed."""
    from critline.instrument import InstrumentError, load_instrument
    from critline.synth import random_scene, write_photo
    from critline.synth.scene import clean_overrides

    overrides: dict = {}
    if ri:
        if len(ri) > 2:
            raise UsageError("--ri: give one or two ray indices")
        overrides["stone_ris"] = tuple(ri)
        overrides["polariser"] = "both"
    if no_stone:
        overrides["stone_ris"] = ()
    for key, value in (("polariser", polariser), ("light", light), ("liquid_ri", liquid),
                       ("scale_offset", scale_offset), ("scale_gain", scale_gain)):
        if value is not None:
            overrides[key] = value
    if instrument is not None:
        try:
            overrides["instrument"] = load_instrument(instrument)
        except InstrumentError as exc:
            raise UsageError(str(exc)) from None
        except (TypeError, ValueError) as exc:  # wrong value types inside the TOML
            raise UsageError(f"{instrument}: not a usable instrument file ({exc})") from None
    if clean:
        overrides.update(clean_overrides())
    if megapixels is not None:
        overrides["megapixels"] = megapixels
    try:
        scene = random_scene(seed, **overrides)
    except (TypeError, ValueError) as exc:
        raise UsageError(f"{out}: {exc}") from None
    sidecar = write_photo(out, scene, seed, overwrite=overwrite).with_suffix(".json")
    truth = json.loads(sidecar.read_text(encoding="utf-8"))
    if as_json:
        typer.echo(json.dumps(truth))
        return
    edges = ", ".join(f"{e['kind']} {e['ri']:.4f} (scale {e['scale_position']:.2f})" for e in truth["edges"])
    typer.echo(f"{out}  {scene.width}x{scene.height}  {scene.light}  status {truth['status']}"
               f"  edges: {edges or 'none'}")
    typer.echo(f"{sidecar}")


@synth_app.command("spot", epilog=cautions.HELP_EPILOG)
def spot(
    folder: Path = typer.Argument(..., help="Folder to write the spot photos into (h00.jpg, h01.jpg ... with .json truth)."),
    ri: float = typer.Option(None, "--ri", help="The curved stone's index at 589.3 nm (default: drawn from the seed)."),
    photos: int = typer.Option(4, "--photos", min=1, max=20, help="Photos in the series (the head moves between them)."),
    reach: float = typer.Option(0.35, "--reach", min=0.0, max=2.0, help="Spot centres span RI +- reach x spot length."),
    seed: int = typer.Option(0, "--seed", help="Seed of the scene draw and of the noise."),
    megapixels: float = typer.Option(1.2, "--megapixels", min=0.05, max=60, help="Frame size."),
    clean: bool = typer.Option(False, "--clean", help="No noise, blur, tilt, dust, vignetting or phone processing."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace existing files."),
) -> None:
    """Render spot (distance) views of a curved stone: one photo per head position."""
    from critline.synth.scene import clean_overrides
    from critline.synth.spot import random_spot_scene, series_values, write_spot_series

    overrides: dict = dict(clean_overrides()) if clean else {}
    if ri is not None:
        if not 1.0 < ri < 3.0:
            raise UsageError(f"--ri: {ri} is not a refractive index")
        overrides["stone_ris"] = (ri,)
    try:
        base = random_spot_scene(seed, megapixels=megapixels, **overrides)
        if ri is not None:
            import dataclasses

            base = dataclasses.replace(base, liquid_ri=max(base.liquid_ri, ri + 0.02))
    except (TypeError, ValueError) as exc:
        raise UsageError(f"{folder}: {exc}") from None
    n = base.stone_ris[0]
    centres = series_values(n, base.spot_length, photos, reach) if photos > 1 else (base.spot_value,)
    try:
        written = write_spot_series(folder, base, seed, centres, overwrite=overwrite)
    except FileExistsError as exc:
        raise UsageError(str(exc)) from None
    typer.echo(f"wrote {len(written)} spot photo(s) of a stone of RI {n:.4f} under {folder}")


@synth_app.command("stone", epilog=cautions.HELP_EPILOG)
def stone(
    folder: Path = typer.Argument(..., help="Folder for the stone's photos (rRRR_pol0.jpg, rRRR_pol90.jpg, rRRR_none.jpg)."),
    principal: list[float] = typer.Option(..., "--principal", help="Principal index at 589.3 nm; give three (isotropic: n n n; uniaxial: o o e)."),
    facet: tuple[float, float, float] = typer.Option((0.6, 0.3, 0.74), "--facet", help="Table facet normal in the frame of the principal axes."),
    rotations: str = typer.Option("0,45,90,135", "--rotations", help="Comma-separated stone rotations, degrees."),
    seed: int = typer.Option(0, "--seed", help="Seed of the phone's variation between shots and of the noise."),
    light: str = typer.Option("sodium", "--light", help="sodium | white"),
    liquid: float = typer.Option(1.79, "--liquid", help="Contact liquid index at 589.3 nm."),
    megapixels: float = typer.Option(1.2, "--megapixels", min=0.05, max=60, help="Frame size."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace existing files."),
) -> None:
    """Render a stone's test session: every rotation with the polariser at 0 and 90 degrees and without."""
    import dataclasses

    from critline.synth import random_scene
    from critline.synth.session import write_session

    if len(principal) != 3:
        raise UsageError("--principal: give exactly three principal indices")
    try:
        angles = [float(x) for x in rotations.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"--rotations: not a comma-separated list of angles: {rotations!r}") from None
    if not angles:
        raise UsageError("--rotations: give at least one angle")
    try:
        base = random_scene(seed, megapixels=megapixels, light=light, liquid_ri=liquid, orientation=1)
    except ValueError as exc:
        raise UsageError(str(exc)) from None

    def vary(i):
        shot = random_scene(seed * 1000 + i + 1, megapixels=megapixels)
        keep = ("width", "height", "field_cx", "field_cy", "field_diameter", "axis_angle_deg", "tilt_deg",
                "tilt_axis_deg", "exposure", "defocus", "motion", "motion_angle_deg", "dust")
        return {k: getattr(shot, k) for k in keep}

    base = dataclasses.replace(base, stone_material=None)
    written = write_session(folder, tuple(principal), facet, base, seed, rotations=angles,
                            polarisers=(0, 90, None), vary=vary, overwrite=overwrite)
    typer.echo(f"wrote {len(written)} photos under {folder}")


@synth_app.command("demo", epilog=cautions.HELP_EPILOG)
def demo(
    samples_dir: Path = typer.Argument(Path("samples"), help="Folder of the demo samples."),
    overwrite: bool = typer.Option(False, "--overwrite", help="Replace existing sample files."),
) -> None:
    """Regenerate the invented demo scenario (parcel of stones and reference set)."""
    from critline.synth.demo import write_demo

    written = write_demo(samples_dir, overwrite=overwrite)
    typer.echo(f"wrote {len(written)} photos under {samples_dir}")

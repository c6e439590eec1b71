"""Calibration files (TOML round trip, overwrite refusal, clear errors) and drift between two."""

import tomllib

import numpy as np
import pytest
from calibration_sim import REFERENCE_SET, simulate

from critline.calibration import (
    DRIFT_LIMIT,
    CalibrationError,
    compare,
    find_previous,
    fit_calibration,
    load_calibration,
    make_calibration,
    write_calibration,
)
from critline.calibration.store import dumps_toml
from critline.errors import UsageError


def calibrate(offset, gain, *, seed=0, created=None, noise=0.0002):
    pairs = simulate(REFERENCE_SET, offset=offset, gain=gain, noise=noise, seed=seed)
    fit = fit_calibration(pairs)
    photos = tuple((f"refs/{p.label}.jpg", f"{i:064x}", p.label) for i, p in enumerate(pairs))
    return make_calibration(fit, photos=photos, light="monochromatic", created=created,
                            setup={"instrument": "bench unit A (invented)", "liquid": "1.79",
                                   "temperature": "21 C", "note": 'quote " and \\ backslash'})


def test_toml_writer_output_is_read_back_by_tomllib():
    doc = {"a": 1, "b": 1e-05, "c": "x\ny\t\"z\"", "d": [1.5, 2.0], "e": [[1.0, 2.0], [3.0, 4.0]],
           "f": True, "g": None, "t": {"k": "v", "sub": {"z": 0.1}},
           "rows": [{"p": "a.jpg", "q": 1.2}, {"p": "b.jpg", "q": None}]}
    back = tomllib.loads(dumps_toml(doc))
    assert back == {"a": 1, "b": 1e-05, "c": "x\ny\t\"z\"", "d": [1.5, 2.0], "e": [[1.0, 2.0], [3.0, 4.0]],
                    "f": True, "t": {"k": "v", "sub": {"z": 0.1}}, "rows": [{"p": "a.jpg", "q": 1.2}, {"p": "b.jpg"}]}


def test_round_trip_keeps_every_figure(tmp_path):
    cal = calibrate(0.004, 0.009)
    path = write_calibration(cal, tmp_path / "cal.toml")
    back = load_calibration(path)
    assert back == cal  # frozen dataclasses: every field, floats exactly (repr round-trips)
    assert back.id.startswith("cal-") and len(back.id) == 14
    for pos in (8.0, 24.4, 45.3):
        assert back.scale_to_ri(pos, 0.03) == cal.scale_to_ri(pos, 0.03)
    text = path.read_text()
    assert "bench unit A (invented)" in text and "sha256" in text and "model_reason" in text


def test_id_is_a_hash_of_the_content():
    a = calibrate(0.004, 0.009, created="2026-12-01T10:00:00+00:00")
    b = calibrate(0.004, 0.009, created="2026-12-01T10:00:00+00:00")
    c = calibrate(0.004, 0.009, created="2026-12-01T10:00:01+00:00")
    assert a.id == b.id != c.id


def test_refuses_to_overwrite_unless_told(tmp_path):
    target = tmp_path / "cal.toml"
    target.write_text("keep me")
    with pytest.raises(UsageError, match="refusing to overwrite"):
        write_calibration(calibrate(0.0, 0.0), target)
    assert target.read_text() == "keep me"
    write_calibration(calibrate(0.0, 0.0), target, overwrite=True)
    assert load_calibration(target).model in ("offset", "offset+gain", "smooth")


@pytest.mark.parametrize("content,reason", [
    (None, "not found"),
    ("this is = = not toml", "not valid TOML"),
    ('schema = "something/9"\n', "not a critline.calibration/1 file"),
    ('schema = "critline.calibration/1"\nid = "x"\n', "missing light"),
])
def test_load_errors_are_one_line_and_name_the_file(tmp_path, content, reason):
    path = tmp_path / "bad.toml"
    if content is not None:
        path.write_text(content)
    with pytest.raises(CalibrationError) as info:
        load_calibration(path)
    msg = str(info.value)
    assert str(path) in msg and reason in msg and "\n" not in msg


def test_drift_is_zero_against_itself_and_measures_a_shift():
    old = calibrate(0.004, 0.009, created="2026-11-01T09:00:00+00:00")
    same = compare(old, old)
    assert abs(same.max_shift) < 1e-12 and not same.flagged
    # the liquid warmed: the whole scale now reads 0.003 higher than the old calibration says
    new = calibrate(0.004 - 0.003, 0.009, created="2026-12-01T09:00:00+00:00")
    drift = compare(new, old)
    # the old map applied to today's position of a stone of index r gives r + 0.003
    assert [p.shift for p in drift.at_references] == pytest.approx([0.003] * len(drift.at_references), abs=0.0004)
    assert drift.flagged and abs(drift.max_shift) > DRIFT_LIMIT
    assert any("liquid" in n and "temperature" in n and "prism" in n for n in drift.notes)


def test_drift_below_the_limit_is_reported_not_flagged():
    old = calibrate(0.004, 0.009, created="2026-11-01T09:00:00+00:00")
    new = calibrate(0.004 - 0.001, 0.009, created="2026-12-01T09:00:00+00:00")
    drift = compare(new, old)
    assert 0.0006 < abs(drift.max_shift) < DRIFT_LIMIT and not drift.flagged
    assert drift.to_json()["limit"] == DRIFT_LIMIT


def test_gain_drift_grows_across_the_range():
    old = calibrate(0.0, 0.0, created="2026-11-01T09:00:00+00:00", noise=0)
    new = calibrate(0.0, 0.02, created="2026-12-01T09:00:00+00:00", noise=0)
    drift = compare(new, old)
    shifts = {round(p.ri, 4): p.shift for p in drift.at_references}
    # a 2 % gain change about 1.55: shift -0.02 (r - 1.55) to first order
    assert shifts[1.7681] == pytest.approx(-0.02 * (1.7681 - 1.55) / 1.02, abs=2e-4)
    assert shifts[1.3777] == pytest.approx(-0.02 * (1.3777 - 1.55) / 1.02, abs=2e-4)
    assert drift.flagged and np.isclose(abs(drift.max_shift), max(abs(v) for v in shifts.values()), atol=3e-4)


def test_previous_from_a_folder_takes_the_latest_earlier_one(tmp_path):
    a = calibrate(0.004, 0.009, created="2026-10-01T09:00:00+00:00")
    b = calibrate(0.003, 0.009, created="2026-11-01T09:00:00+00:00")
    c = calibrate(0.002, 0.009, created="2026-12-05T09:00:00+00:00")
    for cal, name in ((a, "a.toml"), (b, "b.toml"), (c, "c.toml")):
        write_calibration(cal, tmp_path / name)
    (tmp_path / "notes.toml").write_text("not = 'a calibration'\n")
    assert find_previous(tmp_path, before="2026-12-01T09:00:00+00:00").id == b.id
    with pytest.raises(CalibrationError, match="no earlier calibration"):
        find_previous(tmp_path, before="2026-01-01T00:00:00+00:00")

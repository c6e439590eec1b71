"""Calibration files: plain TOML, written atomically, read with :mod:`tomllib`.

The standard library reads TOML but does not write it, so a small writer
for the few shapes a calibration needs (scalars, arrays, tables, arrays of
tables) lives here.  Files are never overwritten unless asked.
"""

from __future__ import annotations

import json
import math
import tomllib
from datetime import UTC, datetime
from pathlib import Path

from critline.calibration.fitting import CalibrationError, PolynomialMap
from critline.calibration.record import LIGHTS, SCHEMA, Calibration, StoredReference
from critline.fileio import atomic_write_text

HEADER = (
    "# critline instrument calibration (plain TOML).\n"
    "# Maps the reader's scale position to refractive index at 589.3 nm; see the\n"
    "# scale_map and references below.  Written by `critline calibrate`; the id is a\n"
    "# short hash of everything else, so a hand-edited file no longer matches its id.\n"
)

# --------------------------------------------------------------------------- TOML writer


def _scalar(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # JSON string escapes are a subset of TOML basic-string escapes
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_scalar(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _key(k: str) -> str:
    return k if k.replace("_", "").replace("-", "").isalnum() and k.isascii() else json.dumps(k)


def dumps_toml(doc: dict) -> str:
    """Serialise a dict of scalars, lists, sub-dicts and lists of dicts.

    ``None`` values are left out (TOML has no null).
    """
    lines: list[str] = []

    def table(d: dict, prefix: str):
        plain = {k: v for k, v in d.items() if v is not None and not isinstance(v, dict)
                 and not (isinstance(v, list) and v and all(isinstance(x, dict) for x in v))}
        for k, v in plain.items():
            lines.append(f"{_key(k)} = {_scalar(v)}")
        for k, v in d.items():
            name = f"{prefix}{_key(k)}"
            if isinstance(v, dict):
                lines.append("")
                lines.append(f"[{name}]")
                table(v, name + ".")
            elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
                for item in v:
                    lines.append("")
                    lines.append(f"[[{name}]]")
                    table(item, name + ".")

    table(doc, "")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- document <-> Calibration


def _map_doc(m: PolynomialMap) -> dict:
    return {"kind": m.kind, "centre": m.centre, "half_span": m.half_span,
            "coefficients": list(m.coefficients), "covariance": [list(r) for r in m.covariance],
            "chi2": m.chi2, "dof": m.dof}


def to_document(cal: Calibration) -> dict:
    """The calibration as a plain dict ready for :func:`dumps_toml`."""
    doc = {
        "schema": SCHEMA,
        "id": cal.id,
        "created": cal.created,
        "light": cal.light,
        "model": cal.model,
        "model_reason": cal.model_reason,
        "valid_range": list(cal.valid_range),
        "residual_rms": cal.residual_rms,
        "loo_rms": cal.loo_rms,
        "warnings": list(cal.warnings),
        "setup": {str(k): str(v) for k, v in cal.setup.items()},
        "instrument": dict(cal.instrument),
        "scale_map": _map_doc(cal.scale_map),
    }
    if cal.field_map is not None:
        doc["field_map"] = {**_map_doc(cal.field_map), "reason": cal.field_reason,
                            "precision": "lower", "valid_range": list(cal.field_valid_range),
                            "residual_rms": cal.field_residual_rms, "loo_rms": cal.field_loo_rms}
    else:
        doc["field_map_missing"] = cal.field_reason
    doc["references"] = [{
        "photo": r.photo, "sha256": r.sha256, "material": r.material, "known_ri": r.known_ri,
        "scale_position": r.scale_position, "scale_uncertainty": r.scale_uncertainty,
        "field_position": r.field_position, "measured_ri": r.measured_ri, "residual": r.residual,
        "loo_residual": r.loo_residual, "field_residual": r.field_residual, "excluded": r.excluded,
    } for r in cal.references]
    return doc


def dumps_calibration(cal: Calibration) -> str:
    return HEADER + "\n" + dumps_toml(to_document(cal))


def write_calibration(cal: Calibration, path: str | Path, *, overwrite: bool = False) -> Path:
    """Write atomically; an existing file is refused unless ``overwrite``."""
    return atomic_write_text(path, dumps_calibration(cal), overwrite=overwrite)


def _need(d: dict, key: str, types, where: str):
    if key not in d:
        raise KeyError(f"missing {where}{key}")
    v = d[key]
    if types is float and isinstance(v, int) and not isinstance(v, bool):
        v = float(v)
    if not isinstance(v, types):
        raise KeyError(f"{where}{key} has the wrong type")
    return v


def _map_from(d: dict, where: str, additive: bool) -> PolynomialMap:
    coef = tuple(float(c) for c in _need(d, "coefficients", list, where))
    cov = tuple(tuple(float(c) for c in row) for row in _need(d, "covariance", list, where))
    if not coef or len(cov) != len(coef) or any(len(r) != len(coef) for r in cov):
        raise KeyError(f"{where}coefficients and covariance do not match")
    return PolynomialMap(kind=_need(d, "kind", str, where), centre=_need(d, "centre", float, where),
                         half_span=_need(d, "half_span", float, where), coefficients=coef,
                         covariance=cov, additive=additive, chi2=float(d.get("chi2", 0.0)),
                         dof=int(d.get("dof", 0)))


def from_document(doc: dict) -> Calibration:
    """Build a :class:`Calibration` from a parsed TOML document (KeyError/ValueError if malformed)."""
    if doc.get("schema") != SCHEMA:
        raise KeyError(f"not a {SCHEMA} file (schema = {doc.get('schema')!r})")
    light = _need(doc, "light", str, "")
    if light not in LIGHTS:
        raise KeyError(f"light must be one of {', '.join(LIGHTS)}")
    inst = _need(doc, "instrument", dict, "")
    for k in ("first", "step"):
        _need(inst, k, float, "instrument.")
    fm = doc.get("field_map")
    refs = []
    for i, r in enumerate(doc.get("references", [])):
        where = f"references[{i}]."
        refs.append(StoredReference(
            photo=_need(r, "photo", str, where), sha256=str(r.get("sha256", "")),
            material=str(r.get("material", "")), known_ri=_need(r, "known_ri", float, where),
            scale_position=_need(r, "scale_position", float, where),
            scale_uncertainty=float(r.get("scale_uncertainty", 0.0)),
            measured_ri=_need(r, "measured_ri", float, where), residual=float(r.get("residual", 0.0)),
            field_position=r.get("field_position"), loo_residual=r.get("loo_residual"),
            field_residual=r.get("field_residual"), excluded=bool(r.get("excluded", False))))
    vr = _need(doc, "valid_range", list, "")
    if len(vr) != 2:
        raise KeyError("valid_range must have two values")
    return Calibration(
        id=_need(doc, "id", str, ""), created=_need(doc, "created", str, ""),
        setup=dict(doc.get("setup", {})), light=light, model=_need(doc, "model", str, ""),
        model_reason=str(doc.get("model_reason", "")), instrument=dict(inst),
        scale_map=_map_from(_need(doc, "scale_map", dict, ""), "scale_map.", additive=True),
        valid_range=(float(vr[0]), float(vr[1])), residual_rms=float(doc.get("residual_rms", math.nan)),
        loo_rms=doc.get("loo_rms"), references=tuple(refs),
        field_map=None if fm is None else _map_from(fm, "field_map.", additive=False),
        field_reason=str(fm.get("reason", "")) if fm else str(doc.get("field_map_missing", "")),
        field_valid_range=tuple(fm["valid_range"]) if fm and "valid_range" in fm else None,
        field_residual_rms=fm.get("residual_rms") if fm else None,
        field_loo_rms=fm.get("loo_rms") if fm else None,
        warnings=tuple(str(w) for w in doc.get("warnings", [])))


def load_calibration(path: str | Path) -> Calibration:
    """Read a calibration file.

    Raises
    ------
    CalibrationError
        One line naming the file and what is wrong with it.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise CalibrationError(f"{path}: calibration file not found") from None
    except IsADirectoryError:
        raise CalibrationError(f"{path}: is a folder, not a calibration file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CalibrationError(f"{path}: cannot read calibration file ({exc})") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CalibrationError(f"{path}: not valid TOML ({exc})") from None
    try:
        return from_document(doc)
    except (KeyError, ValueError, TypeError) as exc:
        msg = exc.args[0] if exc.args else str(exc)
        raise CalibrationError(f"{path}: not a usable calibration ({msg})") from None


def created_time(cal: Calibration) -> datetime | None:
    try:
        t = datetime.fromisoformat(cal.created)
    except ValueError:
        return None
    return t if t.tzinfo is not None else t.replace(tzinfo=UTC)

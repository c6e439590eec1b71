"""A self-contained HTML report of a batch: one file, no scripts, no external requests.

Photos are embedded as downscaled JPEG data URIs, charts as inline SVG drawn
by :mod:`critline.report.svg`, the style sheet is inline; a Content Security
Policy forbids anything else.  Every text taken from the user's files (file
names, stone names, reasons) goes through :func:`html.escape`.

The look is our own: warm paper, slate ink, one sea-slate and one amber
colour for the two edges, cards per stone.
"""

from __future__ import annotations

import base64
import datetime as _dt
import io
import math
from collections.abc import Iterator
from html import escape
from pathlib import Path

from critline import __version__, cautions
from critline.report import svg
from critline.report.document import MAX_CANDIDATES, candidate_name, r4

#: longest side of an embedded photo, pixels
THUMB_SIZE = 360
#: at most this many brightness profiles are drawn per stone
MAX_PROFILES = 12

CSS = """
:root{--paper:#f3f1ec;--card:#fffdf8;--ink:#26303a;--muted:#6b7078;--rule:#d9d2c3;
--low:#2f5d62;--high:#b0642a;--agree:#3d6b45;--conflict:#9c3d2e;--wash:#e9efe9}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
font:15px/1.5 "Source Sans 3","Segoe UI","Noto Sans",system-ui,sans-serif}
main{max-width:1080px;margin:0 auto;padding:28px 22px 60px}
h1,h2,h3{font-family:Georgia,"Noto Serif",serif;font-weight:normal;letter-spacing:.01em}
h1{font-size:28px;margin:0 0 4px}
h2{font-size:21px;margin:0}
h3{font-size:15px;margin:18px 0 6px;color:var(--muted);text-transform:lowercase;letter-spacing:.06em}
.lede{color:var(--muted);margin:0 0 18px}
.ledger{display:grid;grid-template-columns:max-content 1fr;gap:3px 18px;margin:0 0 22px;
padding:14px 18px;background:var(--card);border-top:3px solid var(--low);border-radius:2px}
.ledger dt{color:var(--muted)}
.ledger dd{margin:0;overflow-wrap:anywhere}
table{border-collapse:collapse;width:100%;font-size:14px}
th{text-align:left;font-weight:600;color:var(--muted);border-bottom:1px solid var(--rule);padding:4px 8px}
td{border-bottom:1px solid var(--rule);padding:4px 8px;vertical-align:top;overflow-wrap:anywhere}
td.num{font-variant-numeric:tabular-nums;white-space:nowrap}
table.readings td:first-child{min-width:12em}
table.readings td.status{white-space:nowrap}
.glance a{color:var(--low)}
article.stone{background:var(--card);margin:26px 0;padding:18px 22px;border-radius:2px;
box-shadow:0 1px 0 var(--rule)}
.stone header{display:flex;flex-wrap:wrap;align-items:baseline;gap:6px 16px;
border-bottom:1px solid var(--rule);padding-bottom:8px}
.stone header .tag{font-size:13px;color:var(--muted)}
.cols{display:grid;grid-template-columns:minmax(260px,1fr) minmax(300px,1.25fr);gap:8px 28px}
@media (max-width:760px){.cols{grid-template-columns:1fr}}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;margin:10px 0}
dl.facts dt{color:var(--muted)}
dl.facts dd{margin:0;font-variant-numeric:tabular-nums}
.pm{color:var(--muted)}
ol.cands{list-style:none;padding:0;margin:0}
ol.cands>li{padding:6px 0;border-bottom:1px dotted var(--rule)}
.cand-name{font-weight:600}
.tie{font-size:12px;color:var(--high);margin-left:6px}
.alias{color:var(--muted);font-size:13px}
.meter{display:inline-block;width:90px;height:7px;background:var(--wash);margin:0 8px 0 4px;
vertical-align:middle;border-radius:4px;overflow:hidden}
.meter span{display:block;height:100%;background:var(--low)}
.why{font-size:13px;margin:2px 0 0 0;padding:0;list-style:none;display:flex;flex-wrap:wrap;gap:2px 16px}
.why .agree::before{content:"+ ";color:var(--agree);font-weight:700}
.why .conflict::before{content:"\\2212  ";color:var(--conflict);font-weight:700}
.why .conflict{color:var(--conflict)}
ul.tests,ul.notes{margin:4px 0;padding-left:18px}
.notes li{color:var(--muted)}
.thumbs{display:flex;flex-wrap:wrap;gap:10px}
figure{margin:0;width:232px}
figure img{width:232px;height:174px;object-fit:contain;display:block;border:1px solid var(--rule);
background:#15130f}
figcaption{font-size:12px;color:var(--muted);overflow-wrap:anywhere}
.profiles{display:flex;flex-wrap:wrap;gap:8px}
.profiles figure{width:auto}
.legend{font-size:12.5px;color:var(--muted)}
.legend b.low{color:var(--low)} .legend b.high{color:var(--high)}
.problems li{font-family:ui-monospace,"DejaVu Sans Mono",monospace;font-size:13px;
border-left:3px solid var(--conflict);padding-left:8px;margin:3px 0;list-style:none;overflow-wrap:anywhere}
.problems ul{padding:0}
.status-rejected td{color:var(--conflict)}
footer.cautions{margin-top:34px;padding:14px 18px;border-left:3px solid var(--high);background:var(--card)}
footer.cautions p{margin:6px 0}
footer.cautions .evidence{font-weight:600}
""".strip()

CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def _e(x) -> str:
    return escape("" if x is None else str(x), quote=True)


def _ri(x, dec=4) -> str:
    v = r4(x)
    return "—" if v is None else f"{v:.{dec}f}"


def _pm(value, unc) -> str:
    if r4(value) is None:
        return "—"
    u = r4(unc)
    return _ri(value) + (f' <span class="pm">± {u:.4f}</span>' if u is not None else "")


def thumbnail_data_uri(path: str | Path, size: int = THUMB_SIZE) -> str | None:
    """A downscaled JPEG of an image file as a data URI; None when it cannot be read."""
    try:
        from PIL import Image, ImageOps
        try:
            import pillow_heif

            pillow_heif.register_heif_opener()
        except Exception:  # noqa: BLE001 - HEIC support is optional for thumbnails
            pass
        with Image.open(path) as im:
            im = ImageOps.exif_transpose(im)
            im.draft("RGB", (size, size))
            im = im.convert("RGB")
            im.thumbnail((size, size))
            buf = io.BytesIO()
            im.save(buf, "JPEG", quality=80, optimize=True)
    except Exception:  # noqa: BLE001 - a thumbnail is optional, the reading is not
        return None
    return "data:image/jpeg;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _edge_series(stone):
    """Points for the rotation plot: each stone edge of each usable photo, as low or high edge.

    At one rotation the lower of two distinct readings (two edges in one photo, or one edge in
    each of two polariser photos) is the low edge; a reading alone at its rotation goes with the
    nearer end of the stone's RI range.
    """
    a = stone.analysis
    lo, hi = r4(getattr(a, "ri_low", None)), r4(getattr(a, "ri_high", None))
    usable = stone.usable
    rotation_known = any(p.item.rotation is not None for p in usable)
    by_x: dict[float, list] = {}
    for k, p in enumerate(usable, start=1):
        x = p.item.rotation if rotation_known else k
        if x is None:
            continue
        for e in p.summary.stone_edges:
            by_x.setdefault(float(x), []).append((p, e))
    points = []
    for x, group in by_x.items():
        values = [e.ri for _, e in group]
        spread = max(values) - min(values)
        worst = max(max(e.uncertainty, 1e-4) for _, e in group)
        split = len(group) > 1 and spread > 3.0 * math.sqrt(2.0) * worst
        middle = 0.5 * (max(values) + min(values))
        for p, e in group:
            if split:
                series = "low" if e.ri <= middle else "high"
            elif lo is not None and hi is not None and hi - lo > 1e-4:
                series = "low" if abs(e.ri - lo) <= abs(e.ri - hi) else "high"
            else:
                series = "low"
            marker = "pol" if p.item.polariser is not None else "open"
            label = (f"{p.item.display}: {e.ri:.4f} ± {e.uncertainty:.4f} "
                     f"(rotation {_deg(p.item.rotation)}, polariser {p.item.polariser_setting})")
            points.append((x, float(e.ri), float(max(e.uncertainty, 1e-4)), series, marker, label))
    levels = []
    if lo is not None:
        levels.append((lo, f"low {lo:.4f}", svg.LOW))
    if hi is not None and lo is not None and hi - lo > 1e-4:
        levels.append((hi, f"high {hi:.4f}", svg.HIGH))
    liquids = [e.ri for p in usable for e in p.summary.edges if e.kind == "liquid"]
    if liquids and any(p.summary.status == "over_limit" for p in usable):
        liquids.sort()
        levels.append((liquids[len(liquids) // 2], "liquid (over the limit)", svg.LIQUID))
    return points, levels, rotation_known


def _facts(stone) -> str:
    a = stone.analysis
    if a is None:
        if stone.usable:
            return ('<p class="pm">The readings could not be reduced to properties '
                    '(the reason is below); every reading is listed at the end of this card.</p>')
        return '<p class="pm">No usable reading: nothing could be derived for this stone.</p>'
    rows = []
    if getattr(a, "over_limit", False):
        rows.append(("refractive index", f"over the limit (above {_ri(getattr(a, 'ri_low', None))})"))
    else:
        rows.append(("RI low", _pm(a.ri_low, getattr(a, "uncertainty", None))))
        rows.append(("RI high", _pm(a.ri_high, getattr(a, "uncertainty", None))))
    rows.append(("birefringence", _pm(getattr(a, "birefringence", None),
                                      getattr(a, "birefringence_uncertainty", None))))
    if r4(getattr(a, "beta", None)) is not None:
        rows.append(("beta", _ri(a.beta)))
    if r4(getattr(a, "spot_ri", None)) is not None:
        rows.append(("spot reading", _ri(a.spot_ri, 2)))
    rows.append(("optic character", _e(getattr(a, "optic_character", None) or "undetermined")))
    sign = getattr(a, "optic_sign", None)
    rows.append(("optic sign", _e(sign) if sign else "not decided"))
    if stone.sg is not None:
        rows.append(("specific gravity", _e(f"{stone.sg:g}")))
    flags = tuple(getattr(a, "flags", ()) or ())
    if flags:
        rows.append(("flags", _e(", ".join(flags))))
    return '<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows) + "</dl>"


def _candidates(stone) -> str:
    ident = stone.identification
    if ident is None:
        return '<p class="pm">No identification (see the notes above).</p>'
    items = []
    groups = tuple(getattr(ident, "groups", ()) or ())
    lead_group = set(groups[0]) if groups and len(groups[0]) > 1 else set()
    for c in tuple(ident.candidates)[:MAX_CANDIDATES]:
        score = float(getattr(c, "score", 0.0) or 0.0)
        score = min(1.0, max(0.0, score)) if math.isfinite(score) else 0.0
        aliases = ", ".join(getattr(c, "aliases", ()) or ())
        why = "".join(f'<li class="agree">{_e(t)}</li>' for t in getattr(c, "agrees", ()) or ())
        why += "".join(f'<li class="conflict">{_e(t)}</li>' for t in getattr(c, "conflicts", ()) or ())
        items.append(
            f'<li><span class="cand-name">{_e(candidate_name(c))}</span>'
            + (f' <span class="alias">({_e(aliases)})</span>' if aliases else "")
            + (' <span class="tie">near tie: not separated by these readings</span>'
               if candidate_name(c) in lead_group else "")
            + f'<br><span class="meter"><span style="width:{score * 100:.0f}%"></span></span>'
            f'<span class="num">{score:.2f}</span>'
            + (f'<ul class="why">{why}</ul>' if why else "") + "</li>")
    out = ('<ol class="cands">' + "".join(items) + "</ol>" if items else
           '<p class="pm">No material in the property table fits these readings.</p>')
    ident_notes = tuple(getattr(ident, "notes", ()) or ())
    if ident_notes:
        out += '<ul class="notes">' + "".join(f"<li>{_e(t)}</li>" for t in ident_notes) + "</ul>"
    tests = tuple(getattr(ident, "separating_tests", ()) or ())
    if tests:
        out += ("<h3>tests that would separate them</h3><ul class=\"tests\">"
                + "".join(f"<li>{_e(t)}</li>" for t in tests) + "</ul>")
    return out


def _thumbs(stone) -> str:
    figs = []
    for p in stone.photos:
        if p.summary.status == "rejected":
            continue
        uri = thumbnail_data_uri(p.overlay) if p.overlay else None
        note = ""
        if uri is None:
            uri = thumbnail_data_uri(p.item.path)
            note = " · photo as taken (no marked-up copy)"
        edges = ", ".join([f"{e.ri:.4f}" for e in sorted(p.summary.stone_edges, key=lambda e: e.ri)]
                          + [f"spot {e.ri:.2f}" for e in p.summary.edges if e.kind == "spot"])
        caption = (f"{_e(p.item.display)}<br>rotation {_e(_deg(p.item.rotation))} · polariser "
                   f"{_e(p.item.polariser_setting)}<br>{_e(p.summary.status)}"
                   + (f": {_e(edges)}" if edges else "") + _e(note))
        img = (f'<img src="{uri}" alt="marked-up photo {_e(p.item.display)}">' if uri
               else '<div class="pm">(no image)</div>')
        figs.append(f"<figure>{img}<figcaption>{caption}</figcaption></figure>")
    return '<div class="thumbs">' + "".join(figs) + "</div>" if figs else ""


def _deg(x) -> str:
    return "unknown" if x is None else f"{x:g}°"


def _profiles(stone) -> str:
    figs = []
    for p in stone.usable:
        r = p.reading
        if r.profile is None or not r.edges:
            continue
        marks = [(e.scale_position, e.ri, e.kind) for e in r.edges]
        chart = svg.profile_plot(r.profile[0], r.profile[1], marks,
                                 title=f"brightness near the edge, {p.item.display}")
        if chart:
            figs.append(f"<figure>{chart}<figcaption>{_e(p.item.display)}</figcaption></figure>")
        if len(figs) >= MAX_PROFILES:
            break
    return '<div class="profiles">' + "".join(figs) + "</div>" if figs else ""


def _readings_table(stone) -> str:
    rows = []
    for p in stone.photos:
        r = p.summary
        edges = ", ".join(f"{e.ri:.4f} ± {max(e.uncertainty, 1e-4):.4f}"
                          for e in sorted(r.stone_edges, key=lambda e: e.ri))
        edges = ", ".join([edges] * bool(edges) + [f"spot {e.ri:.2f} ± {e.uncertainty:.2f}"
                                                   for e in r.edges if e.kind == "spot"])
        liquid = ", ".join(f"{e.ri:.4f}" for e in r.edges if e.kind == "liquid")
        detail = r.reason or " ".join(r.quality.flags)
        rows.append(
            f'<tr class="status-{_e(r.status)}"><td>{_e(p.item.display)}</td>'
            f'<td class="num">{_e(_deg(p.item.rotation))}</td><td>{_e(p.item.polariser_setting)}</td>'
            f'<td class="status">{_e(r.status)}</td><td class="num">{_e(edges) or "—"}</td>'
            f'<td class="num">{_e(liquid) or "—"}</td><td>{_e(detail)}</td></tr>')
    return ("<table class=\"readings\"><thead><tr><th>photo</th><th>rotation</th><th>polariser</th>"
            "<th>status</th><th>stone edges (RI)</th><th>liquid</th><th>flags / reason</th></tr></thead>"
            "<tbody>" + "".join(rows) + "</tbody></table>")


def _stone(stone, index: int) -> str:
    a = stone.analysis
    tag = []
    if a is not None:
        tag.append(_e(getattr(a, "optic_character", "") or "undetermined"))
    tag.append(f"{len(stone.usable)} of {len(stone.photos)} photos used")
    points, levels, rotation_known = _edge_series(stone)
    plot = svg.rotation_plot(points, levels=levels, rotation_known=rotation_known,
                             title=f"readings against rotation, {stone.name}")
    legend = ('<p class="legend"><b class="low">●</b> lower edge · <b class="high">■</b> upper edge · '
              'filled: polariser in · open: no polariser or not known · bars: ± one standard '
              'uncertainty</p>') if plot else ""
    notes = list(stone.notes) + list(getattr(a, "notes", ()) or ())
    notes_html = ("<h3>what the readings could not decide</h3><ul class=\"notes\">"
                  + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>") if notes else ""
    profiles = _profiles(stone)
    return (
        f'<article class="stone" id="stone-{index}"><header><h2>{_e(stone.name)}</h2>'
        f'<span class="tag">{" · ".join(tag)}</span></header>'
        f'<div class="cols"><section><h3>derived properties</h3>{_facts(stone)}{notes_html}</section>'
        f'<section><h3>readings against rotation</h3>{plot or _no_plot(stone)}'
        f'{legend}</section></div>'
        f'<h3>ranked candidates</h3>{_candidates(stone)}'
        f'<h3>marked-up photos</h3>{_thumbs(stone) or "<p class=pm>No photo gave a reading.</p>"}'
        + (f"<h3>brightness near each edge</h3>{profiles}" if profiles else "")
        + f"<h3>every reading</h3>{_readings_table(stone)}</article>")


def _no_plot(stone) -> str:
    over = [p for p in stone.usable if p.summary.status == "over_limit"]
    if over:
        liquid = sorted(e.ri for p in over for e in p.summary.edges if e.kind == "liquid")
        where = f" near {liquid[len(liquid) // 2]:.3f}" if liquid else ""
        return (f'<p class="pm">Over the limit in {len(over)} of {len(stone.usable)} photos: only the '
                f'contact liquid\'s line{_e(where)} shows, the stone reads above it.</p>')
    return '<p class="pm">No stone edge to plot.</p>'


def _glance(result) -> str:
    rows = []
    for i, s in enumerate(result.stones, start=1):
        a, ident = s.analysis, s.identification
        lead = tuple(ident.candidates)[0] if ident is not None and tuple(ident.candidates) else None
        if a is None:
            ri = "not analysed"
        elif getattr(a, "over_limit", False):
            bound = _ri(getattr(a, "ri_low", None), 3)
            ri = "over the limit" + (f" (above {bound})" if bound != "—" else "")
        else:
            lo, hi = _ri(getattr(a, "ri_low", None)), _ri(getattr(a, "ri_high", None))
            ri = lo if hi in ("—", lo) else f"{lo} – {hi}"
        rows.append(
            f'<tr><td><a href="#stone-{i}">{_e(s.name)}</a></td><td class="num">{_e(ri)}</td>'
            f'<td class="num">{_ri(getattr(a, "birefringence", None))}</td>'
            f'<td>{_e(getattr(a, "optic_character", None) or "undetermined")}</td>'
            f'<td>{_e(getattr(a, "optic_sign", None) or "—")}</td>'
            f'<td>{_e(candidate_name(lead) if lead is not None else "—")}</td></tr>')
    return ('<table class="glance"><thead><tr><th>stone</th><th>RI range</th><th>birefringence</th>'
            '<th>optic character</th><th>sign</th><th>leading candidate</th></tr></thead><tbody>'
            + "".join(rows) + "</tbody></table>")


def generated_now() -> str:
    """The time a page is written, as the report shows it."""
    return _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")


def batch_html(result, *, generated: str | None = None) -> str:
    """The self-contained HTML report of a :class:`critline.batch.BatchResult`."""
    return "".join(iter_batch_html(result, generated=generated))


def iter_batch_html(result, *, generated: str | None = None) -> Iterator[str]:
    """:func:`batch_html` in pieces, one stone card at a time (each card embeds its photos: a
    large batch's page need not be held whole in memory to be written)."""
    generated = generated or generated_now()
    cal = result.calibration_info or {}
    if result.calibration_id:
        cal_text = f"{result.calibration_id}"
        labels = {"created": "made", "light": "light", "model": "model",
                  "residual_rms": "residual rms", "valid_range": "valid"}
        extra = ", ".join(f"{labels.get(k, k)} {v}" for k, v in cal.items() if k != "id")
        if extra:
            cal_text += f" ({extra})"
    else:
        cal_text = "none: readings are the scale's nominal values"
    inst = result.instrument
    counts = result.counts
    ledger = [
        ("read from", _e(result.source) + f" ({_e(result.grouping)})"),
        ("calibration", _e(cal_text)),
        ("instrument", _e(f"{inst.name}: scale {inst.first:.2f}–{inst.last:.2f}, contact liquid "
                          f"{inst.liquid_ri:.3f}")),
        ("photos", _e(f"{counts.get('photos', 0)} in {len(result.stones)} stone(s): "
                      f"{counts.get('read', 0)} read now, {counts.get('cached', 0)} from earlier runs, "
                      f"{counts.get('rejected', 0)} without a result")),
        ("written", _e(f"{generated} by critline {__version__}")),
    ]
    problems = "".join(f"<li>{_e(p.line())}</li>" for p in result.problems)
    yield ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
           f'<meta http-equiv="Content-Security-Policy" content="{CSP}">'
           '<meta name="viewport" content="width=device-width, initial-scale=1">'
           f"<title>critline report: {_e(Path(result.source).name or result.source)}</title>"
           f"<style>{CSS}</style></head><body>")
    yield ('<main><h1>Refractometer readings</h1>'
           '<p class="lede">Shadow edges read from photos of the eyepiece view, reduced per stone and '
           'compared with the property table. Evidence for a gemmologist, not a verdict.</p>'
           '<dl class="ledger">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in ledger) + "</dl>"
           "<h3>stones at a glance</h3>" + _glance(result))
    for i, s in enumerate(result.stones, start=1):
        yield _stone(s, i)
    yield ('<section class="problems"><h3>problem files</h3>'
           + (f"<ul>{problems}</ul>" if problems else '<p class="pm">None: every photo gave a result.</p>')
           + "</section>"
           + '<footer class="cautions"><h3>cautions</h3>'
           + "".join(f'<p class="{"evidence" if c == cautions.EVIDENCE else ""}">{_e(c)}</p>'
                     for c in cautions.ALL)
           + "</footer></main>")
    yield "</body></html>"

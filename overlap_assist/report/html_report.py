"""One self-contained HTML page for a batch of analysed clips: plots, plain-word findings, sources.

A clip is a dict::

    {"name": str,
     "analysis": analysis_to_dict(...) output (fps, gravity_mps2, frames, load_factor, phases,
                 flights, landings, warnings),
     "body_height": {"frames": [...], "height_m": [...]},          optional
     "chains": [{"chain", "frames", "tip_swing_deg", "keys_before", "keys_after"}, ...],  optional
     "images": {"contact_sheet": "relative/path.png"}}              optional

Per clip the page shows: load over time with the phases shaded and the jump events marked; body
height with the parabola each flight implies; findings in animator's terms (verdict, retiming
advice in frames, easing in flight, late arm swing, landings, warnings); chain tip swing with key
counts; the images. Everything is inline (CSS, SVG): the page opens offline in any browser.
"""
from __future__ import annotations

import math
import os

import numpy as np

from ..core import readout
from ..core.constants import CAUTION
from .findings import as_float, clip_findings, fmt_count, fmt_fixed, verdict_text, verdict_word
from .svg_plot import (PlotArea, axes, band, esc, hline, margin_label, marker, num, polyline, spread,
                       svg_close, svg_open, vline)


SOURCES = (
    "Velocity and acceleration: Savitzky, A. &amp; Golay, M. J. E. (1964), <i>Anal. Chem.</i> 36(8):1627.",
    "Load factor n = 1 + a<sub>up</sub>/g: Newton's second law; Linthorne, N. P. (2001), <i>Am. J. Phys.</i> 69(11):1198.",
    "Hang time and apex, h = gT²/8: Bosco, C., Luhtanen, P. &amp; Komi, P. V. (1983), <i>Eur. J. Appl. Physiol.</i> 50:273.",
    "Center of mass: Dempster (1955) as tabulated by Winter, D. A. (2009), <i>Biomechanics and Motor Control of "
    "Human Movement</i>, 4th ed.; de Leva, P. (1996), <i>J. Biomech.</i> 29(9):1223.",
    "Phase names: McMahon, J. J. et al. (2018), <i>Strength Cond. J.</i> 40(4):96.",
    "Floaty below 0.8 g and heavy above 1.25 g of the scene's gravity: common practice.",
)

PHASE_STYLE = {
    # name: (short label drawn on the band, light fill)
    "quiet stance": ("Q", "#ecebe4"),
    "unweighting": ("U", "#dce7f1"),
    "braking": ("B", "#f5dfcc"),
    "propulsion": ("P", "#f1d4d9"),
    "flight": ("F", "#d7ecdd"),
    "landing": ("L", "#eedfb9"),
    "recovery": ("R", "#e3dbef"),
}
OTHER_PHASE = ("?", "#e9e9e9")

CHAIN_STYLES = (
    # (stroke, dash pattern): colour and dashes both tell the lines apart
    ("#1f4e79", ""), ("#a0451c", "7 4"), ("#3e7a3a", "2 3"), ("#6b3f8f", "10 3 2 3"),
    ("#8a6d12", "4 2"), ("#2f6f73", "12 4"), ("#7d2d4a", "1 2"), ("#4d5358", "6 2 1 2"),
)

EVENT_ANCHOR = {"takeoff": "end", "apex": "middle", "touchdown": "start"}

PARABOLA_POINTS = 64
"""Samples per drawn flight parabola (smooth at any zoom of an 880-px plot)."""


def build_report(clips, title: str = "Overlap Assist report") -> str:
    """The whole report as an HTML document (UTF-8 text, no external references)."""
    clips = list(clips or [])
    body = [f"<header><h1>{esc(title)}</h1>",
            f'<p class="caution"><strong>Caution.</strong> {esc(CAUTION)}.</p>',
            _overview(clips), "</header>"]
    body += [_clip_article(i, clip) for i, clip in enumerate(clips)]
    if not clips:
        body.append('<p class="empty">No clips were given.</p>')
    body.append(_footer())
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{esc(title)}</title><style>{_CSS}</style></head>\n<body><main>\n"
            + "\n".join(body) + "\n</main></body></html>\n")


def write_report(path, clips, title: str = "Overlap Assist report") -> None:
    """Write the report to ``path`` atomically (temporary file in the same folder, then rename)."""
    text = build_report(clips, title)
    path = os.fspath(path)
    folder, base = os.path.split(os.path.abspath(path))
    tmp = os.path.join(folder, f".{base}.{os.getpid()}.tmp")
    try:
        # "x": never clobber another writer's temporary file; permissions follow the umask.
        with open(tmp, "x", encoding="utf-8") as f:
            f.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise


# ---------------------------------------------------------------- data access

def _series(frames, values):
    f = np.array([as_float(v) for v in (frames or [])], dtype=float)
    v = np.array([as_float(v) for v in (values or [])], dtype=float)
    n = min(f.size, v.size)
    return f[:n], v[:n]


def _analysis(clip) -> dict:
    return clip.get("analysis") or {}


def _clip_name(index: int, clip) -> str:
    name = clip.get("name")
    return str(name) if name not in (None, "") else f"clip {index + 1}"


# ---------------------------------------------------------------- plot areas (public for tests)

def load_series(clip):
    """(frames, load) to plot: the per-frame curve with each landing's sub-frame peak merged in, so
    the plotted curve reaches the peak the findings quote."""
    a = _analysis(clip)
    frames, load = _series(a.get("frames"), a.get("load_factor"))
    peaks = [(as_float(x.get("peak_frame")), as_float(x.get("peak_load_g"))) for x in a.get("landings") or []]
    peaks = [(f, v) for f, v in peaks if math.isfinite(f) and math.isfinite(v)]
    if peaks and frames.size:
        keep = ~np.isin(frames, [f for f, _ in peaks])
        frames = np.concatenate([frames[keep], [f for f, _ in peaks]])
        load = np.concatenate([load[keep], [v for _, v in peaks]])
        order = np.argsort(frames, kind="stable")
        frames, load = frames[order], load[order]
    return frames, load


def load_area(clip) -> PlotArea | None:
    """Plot area of the load figure of ``clip`` (None when there is no load curve)."""
    frames, load = load_series(clip)
    ok = np.isfinite(frames) & np.isfinite(load)
    if ok.sum() < 2:
        return None
    return PlotArea.around(frames[ok].min(), frames[ok].max(), min(0.0, load[ok].min()),
                           max(1.0, load[ok].max()), y_pad=0.06)


def flight_parabola(flight: dict, frames, heights, fps: float):
    """Frames and heights of the parabola a flight implies, anchored at the body height at takeoff.

    z(τ) = z_to + v0·τ − ½·g_implied·τ², τ = (frame − takeoff_frame)/fps, z_to interpolated in the
    body height at the takeoff frame. The apex frame is one of the samples. None if incomplete.
    """
    to, td = as_float(flight.get("takeoff_frame")), as_float(flight.get("touchdown_frame"))
    g, v0, apex = as_float(flight.get("implied_gravity_mps2")), as_float(flight.get("takeoff_speed_mps")), \
        as_float(flight.get("apex_frame"))
    f, z = _series(frames, heights)
    ok = np.isfinite(f) & np.isfinite(z)
    if not all(map(math.isfinite, (to, td, g, v0, fps))) or td <= to or fps <= 0 or ok.sum() < 2:
        return None
    z_to = float(np.interp(to, f[ok], z[ok]))
    fr = np.linspace(to, td, PARABOLA_POINTS)
    if math.isfinite(apex) and to < apex < td:
        fr = np.union1d(fr, [apex])
    tau = (fr - to) / fps
    return fr, z_to + v0 * tau - 0.5 * g * tau**2


def scene_gravity_arc(flight: dict, frames, heights, fps: float, g_scene: float):
    """The same takeoff at the scene's gravity, until it is back at the landing height (or touchdown).

    Drawn beside a floaty or heavy flight so the mismatch shows: z(τ) = z_to + v0·τ − ½·g·τ².
    None for ballistic flights or missing data.
    """
    if verdict_word(flight) not in ("floaty", "heavy") or not g_scene > 0:
        return None
    fitted = flight_parabola(flight, frames, heights, fps)
    if fitted is None:
        return None
    to, td, v0 = as_float(flight.get("takeoff_frame")), as_float(flight.get("touchdown_frame")), \
        as_float(flight.get("takeoff_speed_mps"))
    z_to, z_td = float(fitted[1][0]), float(fitted[1][-1])
    # Positive root of z_to + v0·τ − ½gτ² = z_td, capped at the animated touchdown.
    disc = v0 * v0 + 2 * g_scene * (z_to - z_td)
    tau_end = (v0 + math.sqrt(disc)) / g_scene if disc > 0 else (td - to) / fps
    end = min(td, to + tau_end * fps)
    if not end > to:
        return None
    fr = np.linspace(to, end, PARABOLA_POINTS)
    tau = (fr - to) / fps
    return fr, z_to + v0 * tau - 0.5 * g_scene * tau**2


def _parabolas(clip):
    """(flight, fitted arc, scene-gravity arc or None) for each flight that can be drawn."""
    a, bh = _analysis(clip), clip.get("body_height") or {}
    fps, g_scene = as_float(a.get("fps")), as_float(a.get("gravity_mps2"))
    out = []
    for fl in a.get("flights") or []:
        p = flight_parabola(fl, bh.get("frames"), bh.get("height_m"), fps)
        if p is not None:
            out.append((fl, p, scene_gravity_arc(fl, bh.get("frames"), bh.get("height_m"), fps, g_scene)))
    return out


def height_area(clip) -> PlotArea | None:
    """Plot area of the body-height figure (body height and flight parabolas), None without data."""
    bh = clip.get("body_height") or {}
    frames, z = _series(bh.get("frames"), bh.get("height_m"))
    ok = np.isfinite(frames) & np.isfinite(z)
    if ok.sum() < 2:
        return None
    zs = [z[ok]] + [arc[1] for _, fit, ref in _parabolas(clip) for arc in (fit, ref) if arc is not None]
    lo, hi = min(float(np.min(v)) for v in zs), max(float(np.max(v)) for v in zs)
    # Extra room above for the implied-gravity label over each apex.
    return PlotArea.around(frames[ok].min(), frames[ok].max(), lo, hi + 0.12 * max(hi - lo, 0.05), y_pad=0.05)


def chain_area(clip) -> PlotArea | None:
    """Plot area of the chain tip-swing figure, None without chain data."""
    xs, ys = [], []
    for ch in clip.get("chains") or []:
        f, v = _series(ch.get("frames"), ch.get("tip_swing_deg"))
        ok = np.isfinite(f) & np.isfinite(v)
        xs.append(f[ok])
        ys.append(v[ok])
    if not xs or sum(x.size for x in xs) < 2:
        return None
    x, y = np.concatenate(xs), np.concatenate(ys)
    return PlotArea.around(x.min(), x.max(), min(0.0, y.min()), max(y.max(), 1.0), y_pad=0.05)


# ---------------------------------------------------------------- figures

def _with_labels(area, labels):
    """Right-margin labels (y_px, text, cls), moved apart so none overlap."""
    ys = spread([y for y, _, _ in labels], lo=area.top, hi=area.height - area.bottom)
    return "".join(margin_label(area, y, text, cls) for y, (_, text, cls) in zip(ys, labels))


def load_figure(clip) -> str:
    a, area = _analysis(clip), load_area(clip)
    if area is None:
        return '<p class="empty">No load curve in this clip.</p>'
    frames, load = load_series(clip)
    parts = [svg_open(area, "Load over time in g, with jump phases and events")]
    seen = []
    for ph in a.get("phases") or []:
        name = str(ph.get("name", ""))
        short, fill = PHASE_STYLE.get(name, OTHER_PHASE)
        parts.append(band(area, as_float(ph.get("start_frame")), as_float(ph.get("end_frame")), fill, "phase",
                          short, f"{name}: frames {num(as_float(ph.get('start_frame')), 1)}–"
                                 f"{num(as_float(ph.get('end_frame')), 1)}"))
        if name not in seen:
            seen.append(name)
    parts.append(axes(area, "frame", "load (g)"))
    parts.append(hline(area, 0.0, "ref zero") + hline(area, 1.0, "ref one"))
    for fl in a.get("flights") or []:
        for event in ("takeoff", "apex", "touchdown"):
            x = as_float(fl.get(f"{event}_frame"))
            if math.isfinite(x):
                parts.append(vline(area, x, f"event {event}", event, EVENT_ANCHOR[event]))
    parts.append(polyline(area, frames, load, "load"))
    ok = np.isfinite(load)
    labels = [(float(area.y_px(0.0)), "0 g: airborne", "ref-label"),
              (float(area.y_px(1.0)), "1 g: standing", "ref-label")]
    if ok.any():
        labels.append((float(area.y_px(load[ok][-1])), "load", "line-label"))
    parts += [_with_labels(area, labels), svg_close()]
    legend = "".join(f'<span class="item"><span class="swatch" style="background:{esc(PHASE_STYLE.get(n, OTHER_PHASE)[1])}">'
                     f'{esc(PHASE_STYLE.get(n, OTHER_PHASE)[0])}</span>{esc(n)}</span>' for n in seen)
    events = ('<p class="legend">events: <span class="item"><span class="key event"></span>takeoff</span>'
              '<span class="item"><span class="key event dotted"></span>apex</span>'
              '<span class="item"><span class="key event dashed"></span>touchdown</span></p>') if a.get("flights") else ""
    return "".join(parts) + (f'<p class="legend">phases: {legend}</p>' if legend else "") + events


def height_figure(clip) -> str:
    area = height_area(clip)
    if area is None:
        return '<p class="empty">No body height was given for this clip.</p>'
    bh = clip.get("body_height") or {}
    frames, z = _series(bh.get("frames"), bh.get("height_m"))
    g_scene = as_float(_analysis(clip).get("gravity_mps2"))
    parts = [svg_open(area, "Body height over time with the parabola each flight implies"),
             axes(area, "frame", "height (m)"), polyline(area, frames, z, "body")]
    labels = []
    ok = np.isfinite(z)
    if ok.any():
        labels.append((float(area.y_px(z[ok][-1])), "body", "line-label"))
    arcs = _parabolas(clip)
    for k, (fl, (pf, pz), ref) in enumerate(arcs):
        parts.append(polyline(area, pf, pz, "parabola", data={"flight": k}))
        if ref is not None:
            parts.append(polyline(area, ref[0], ref[1], "ballistic", data={"flight": k}))
            parts.append(f'<text class="ref-label halo" x="{num(float(area.x_px(ref[0][-1])) + 5)}" '
                         f'y="{num(float(area.y_px(ref[1][-1])) - 6)}">at scene gravity</text>')
        g = as_float(fl.get("implied_gravity_mps2"))
        ratio = g / g_scene if g_scene > 0 else as_float(fl.get("gravity_ratio"))
        i = int(np.argmax(pz))
        parts.append(marker(area, pf[i], pz[i], "apex-dot",
                            f"fit: {fmt_fixed(g, 2)} m/s² = {readout.ratio_g(ratio)}"))
    parts += [_with_labels(area, labels), svg_close()]
    legend = ""
    if arcs:
        legend = ('<p class="legend"><span class="item"><span class="key solid"></span>body height</span>'
                  '<span class="item"><span class="key dashed accent"></span>parabola fitted to the flight '
                  '(implied gravity)</span>')
        if any(ref is not None for _, _, ref in arcs):
            legend += ('<span class="item"><span class="key dotted"></span>same takeoff at the scene\'s '
                       'gravity</span>')
        legend += "</p>"
    return "".join(parts) + legend


SWING_NOTE = ("Tip swing is measured from the animated pose: the angle between where the simulation puts "
              "each chain's last bone and where the animation alone puts it (0° = no overlap added).")


def chain_figure(clip) -> str:
    chains = clip.get("chains") or []
    area = chain_area(clip)
    if not chains:
        return '<p class="empty">No chains were simulated for this clip.</p>'
    parts, labels, legend = [], [], []
    if area is not None:
        parts += [svg_open(area, "Chain tip swing from the animated pose over time"),
                  axes(area, "frame", "tip swing from the animated pose (°)", 1)]
        for fl in _analysis(clip).get("flights") or []:
            for event in ("takeoff", "touchdown"):
                x = as_float(fl.get(f"{event}_frame"))
                if math.isfinite(x) and area.x_min <= x <= area.x_max:
                    parts.append(vline(area, x, f"event {event}", event, EVENT_ANCHOR[event]))
        for k, ch in enumerate(chains):
            stroke, dash = CHAIN_STYLES[k % len(CHAIN_STYLES)]
            name = str(ch.get("chain", f"chain {k + 1}"))
            f, v = _series(ch.get("frames"), ch.get("tip_swing_deg"))
            style = f"stroke:{stroke}" + (f";stroke-dasharray:{dash}" if dash else "")
            parts.append(polyline(area, f, v, "chain", style, {"chain": name}))
            ok = np.isfinite(f) & np.isfinite(v)
            if ok.any():
                # Named in the right margin at the line's last value: never on top of a curve.
                labels.append((float(area.y_px(v[ok][-1])), name, "line-label"))
            legend.append(f'<span class="item"><span class="key" style="border-top:2px '
                          f'{"dashed" if dash else "solid"} {stroke}"></span>{esc(name)}</span>')
        parts += [_with_labels(area, labels), svg_close(), f'<p class="legend">{"".join(legend)}</p>']
    parts.append(f'<p class="legend swing-note">{esc(SWING_NOTE)}</p>')
    rows = []
    for k, ch in enumerate(chains):
        before, after = as_float(ch.get("keys_before")), as_float(ch.get("keys_after"))
        pct = f"{fmt_fixed(100 * (1 - after / before), 1)} %" if before > 0 and math.isfinite(after) else "—"
        rows.append(f"<tr><td>{esc(ch.get('chain', f'chain {k + 1}'))}</td><td>{fmt_count(before)}</td>"
                    f"<td>{fmt_count(after)}</td><td>{pct}</td></tr>")
    parts.append('<table class="keys"><thead><tr><th>chain</th><th>keys simulated</th><th>keys after '
                 'reduction</th><th>reduction</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table>")
    return "".join(parts)


def findings_section(clip) -> str:
    groups, n_fix, warnings = clip_findings(_analysis(clip))
    parts = [f'<p class="status {"clean" if n_fix == 0 and not warnings else "issues"}">{esc(_status(n_fix, warnings))}</p>']
    for heading, items in groups:
        parts.append(f"<h4>{esc(heading)}</h4><ul class=\"findings\">")
        parts += [f'<li class="{kind}"><span class="tag">{"fix" if kind == "fix" else "note"}</span>'
                  f"{esc(text)}</li>" for kind, text in items]
        parts.append("</ul>")
    if warnings:
        parts.append('<h4>Warnings</h4><ul class="findings">')
        parts += [f'<li class="warn"><span class="tag">warn</span>{esc(w)}</li>' for w in warnings]
        parts.append("</ul>")
    return "".join(parts)


def _status(n_fix: int, warnings) -> str:
    if n_fix:
        return f"{n_fix} thing{'s' if n_fix > 1 else ''} to fix" + (f", {len(warnings)} warning(s)" if warnings else "")
    if warnings:
        return f"No flight problems found; {len(warnings)} warning{'s' if len(warnings) > 1 else ''} below"
    return "No problems found"


# ---------------------------------------------------------------- page parts

def _overview(clips) -> str:
    if not clips:
        return ""
    rows = []
    for i, clip in enumerate(clips):
        a = _analysis(clip)
        _, n_fix, warnings = clip_findings(a)
        verdicts = ", ".join(verdict_text(f) for f in a.get("flights") or []) or "no flight"
        rows.append(f'<tr><td><a href="#clip-{i + 1}">{esc(_clip_name(i, clip))}</a></td>'
                    f"<td>{len(a.get('flights') or [])}</td><td>{esc(verdicts)}</td>"
                    f"<td>{esc(_status(n_fix, warnings))}</td></tr>")
    return ('<table class="overview"><thead><tr><th>clip</th><th>flights</th><th>verdict</th>'
            '<th>findings</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table>")


def _clip_article(index: int, clip) -> str:
    a = _analysis(clip)
    frames = [f for f in (as_float(x) for x in a.get("frames") or []) if math.isfinite(f)]
    meta = []
    if frames:
        meta.append(f"frames {num(min(frames), 1)}–{num(max(frames), 1)}")
    if math.isfinite(as_float(a.get("fps"))):
        meta.append(f"{num(as_float(a.get('fps')), 3)} fps")
    if math.isfinite(as_float(a.get("gravity_mps2"))):
        meta.append(f"gravity {num(as_float(a.get('gravity_mps2')), 2)} m/s²")
    if a.get("body_source"):
        meta.append("body: " + {"com": "center of mass", "root": "root bone"}.get(a["body_source"], str(a["body_source"])))
    sections = [("Load over time", load_figure(clip)),
                ("Body height and flight parabola", height_figure(clip)),
                ("Findings", findings_section(clip)),
                ("Chains: tip swing and keys", chain_figure(clip))]
    from .flight_figures import flight_sections
    sections[3:3] = flight_sections(clip)
    images = _images(clip)
    if images:
        sections.append(("Pictures", images))
    body = "".join(f'<section><h3><span class="num">{k + 1}</span>{esc(h)}</h3>{html}</section>'
                   for k, (h, html) in enumerate(sections))
    return (f'<article class="clip" id="clip-{index + 1}"><h2>{esc(_clip_name(index, clip))}</h2>'
            f'<p class="meta">{esc(" · ".join(meta))}</p>{body}</article>')


def _is_local(path: str) -> bool:
    """Only relative or absolute file paths are shown; anything with a scheme or host is not."""
    p = path.strip().lower()
    return bool(p) and "://" not in p and not p.startswith("//") and not p.startswith(("http:", "https:", "ftp:"))


def _images(clip) -> str:
    out = []
    for key, path in (clip.get("images") or {}).items():
        caption = str(key).replace("_", " ")
        if isinstance(path, str) and _is_local(path):
            out.append(f'<figure><img src="{esc(path)}" alt="{esc(caption)}" loading="lazy">'
                       f"<figcaption>{esc(caption)}</figcaption></figure>")
        else:
            out.append(f'<p class="empty">{esc(caption)}: not shown (only local files are embedded).</p>')
    return "".join(out)


def _footer() -> str:
    items = "".join(f"<li>{s}</li>" for s in SOURCES)
    return (f'<footer><p class="caution"><strong>Caution.</strong> {esc(CAUTION)}.</p>'
            f"<h3>Methods and sources</h3><ul class=\"sources\">{items}</ul></footer>")


_CSS = """
:root{--ink:#1d2125;--soft:#5b6269;--paper:#fbfaf6;--rule:#d8d3c7;--warm:#9c3f16;--calm:#2f5e3c}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
 font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
main{max-width:960px;margin:0 auto;padding:28px 24px 56px}
h1{font-size:27px;line-height:1.2;margin:0 0 10px;font-weight:650;letter-spacing:-.01em}
h2{font-size:21px;margin:0;font-weight:650}
h3{font-size:12px;text-transform:uppercase;letter-spacing:.09em;color:var(--soft);font-weight:600;
 margin:22px 0 8px;padding-bottom:4px;border-bottom:1px solid var(--rule)}
h3 .num{display:inline-block;min-width:1.6em;color:var(--ink)}
h4{font-size:15px;margin:14px 0 4px}
.caution{margin:8px 0 16px;padding:8px 12px;border-left:4px solid var(--warm);background:#f3ece0}
.meta{margin:2px 0 0;color:var(--soft);font-size:13px}
table{border-collapse:collapse;width:100%;font-size:14px;margin:6px 0}
th{text-align:left;font-weight:600;color:var(--soft);border-bottom:1.5px solid var(--ink);padding:4px 8px}
td{border-bottom:1px solid var(--rule);padding:4px 8px;vertical-align:top}
table.keys td:not(:first-child),table.keys th:not(:first-child){text-align:right;font-variant-numeric:tabular-nums}
a{color:inherit}
article.clip{margin-top:38px;padding-top:14px;border-top:3px double var(--rule)}
svg.plot{display:block;width:100%;height:auto;margin:4px 0}
svg text{font-family:inherit;font-size:11px;fill:#3a3f45}
svg .axis-title{font-size:12px;fill:var(--soft)}
svg .band-label{font-weight:600;fill:#4a4f55}
svg .marker-label{font-size:11px;font-style:italic}
svg .line-label{font-weight:600;fill:var(--ink)}
svg .halo{paint-order:stroke;stroke:var(--paper);stroke-width:3px;stroke-linejoin:round}
svg .ref-label{fill:var(--soft)}
svg .point-label{font-weight:600;fill:var(--warm)}
.frame{fill:none;stroke:#a29d92}
.grid{stroke:#e6e2d8}
.phase{stroke:none}
.ref{stroke:#77726a;stroke-dasharray:2 3}
.event{stroke:#3b4046}
.event.apex{stroke-dasharray:1 3}
.event.touchdown{stroke-dasharray:6 3}
.load,.body{fill:none;stroke:#1e3d5a;stroke-width:1.8;stroke-linejoin:round}
.parabola{fill:none;stroke:var(--warm);stroke-width:1.6;stroke-dasharray:7 4}
.ballistic{fill:none;stroke:#4f565d;stroke-width:1.3;stroke-dasharray:1.5 3}
.apex-dot{fill:var(--warm);stroke:#fff;stroke-width:1}
.chain,.spin{fill:none;stroke-width:1.7;stroke-linejoin:round}
.legend{font-size:13px;color:var(--soft);margin:2px 0 8px}
.legend .item{display:inline-flex;align-items:center;margin-right:14px;white-space:nowrap}
.swatch{display:inline-block;min-width:18px;height:16px;margin-right:5px;border:1px solid #b9b4a9;
 font-size:10px;font-weight:700;line-height:14px;text-align:center;color:#4a4f55}
.key{display:inline-block;width:26px;margin-right:6px;border-top:2px solid #1e3d5a}
.key.dotted{border-top:2px dotted #3b4046}.key.dashed{border-top:2px dashed #3b4046}
.key.solid{border-top-color:#1e3d5a}.key.event{border-top-color:#3b4046}.key.accent{border-top-color:var(--warm)}
.status{display:inline-block;margin:2px 0 6px;padding:3px 10px;border:1.5px solid;font-weight:600}
.status.clean{color:var(--calm)}.status.issues{color:var(--warm)}
ul.findings{list-style:none;padding:0;margin:0}
ul.findings li{padding:3px 0 3px 62px;text-indent:-62px}
.tag{display:inline-block;width:52px;margin-right:10px;text-indent:0;text-align:center;font-size:11px;
 font-weight:700;text-transform:uppercase;letter-spacing:.06em;border:1px solid currentColor;border-radius:2px}
li.fix .tag{color:var(--warm)}li.note .tag{color:var(--soft)}li.warn .tag{color:#7a5a00}
.empty{color:var(--soft);font-style:italic}
figure{margin:8px 0}figure img{max-width:100%;border:1px solid var(--rule)}
figcaption{font-size:13px;color:var(--soft)}
footer{margin-top:44px;padding-top:10px;border-top:3px double var(--rule);font-size:13px}
ul.sources{padding-left:18px;color:var(--soft)}
@media print{body{background:#fff}article.clip{break-before:page}section{break-inside:avoid}}
"""

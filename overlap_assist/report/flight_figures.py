"""Report figures for the flight physics: angular momentum per flight and the arc before/after the fix.

A clip may carry (both optional)::

    "spin": [spin_to_dict(...) per flight: frames, h_body_m2ps_per_kg {left, forward, up}, finding, ...]
    "flight_fix": {"frames": [...], "height_before_m": [...], "height_after_m": [...],
                   "flights": fix_to_dict(...)["flights"]}

H is drawn in the body's own axes (left: somersault, forward: cartwheel, up: twist), per kg of
body mass; a flat line means the spin is conserved, as it must be in the air.
"""
from __future__ import annotations

import numpy as np

from ..core import readout
from .findings import as_float
from .svg_plot import PlotArea, axes, esc, margin_label, polyline, spread, svg_close, svg_open, vline

H_STYLES = (("left", "#1f4e79", "", "somersault"),
            ("forward", "#a0451c", "7 4", "cartwheel"),
            ("up", "#3e7a3a", "2 3", "twist"))
H_KEY = ("H per kg of body mass about the body's own axes: somersault about its left axis (forward +), "
         "cartwheel about its forward axis (tipping right +), twist about its up axis (turning left +). "
         "A flat line is a spin kept, as it must be in the air.")


def _arr(values):
    return np.array([as_float(v) for v in (values or [])], dtype=float)


def spin_figure(clip) -> str:
    """H over each flight, three components, with the plain-words finding under the plot."""
    flights = clip.get("spin") or []
    if not flights:
        return '<p class="empty">No spin check was run for this clip.</p>'
    parts = []
    for k, fl in enumerate(flights):
        f = _arr(fl.get("frames"))
        comps = {name: _arr((fl.get("h_body_m2ps_per_kg") or {}).get(name)) for name, *_ in H_STYLES}
        vals = np.concatenate([v for v in comps.values() if v.size] or [np.zeros(1)])
        ok = np.isfinite(vals)
        if f.size < 2 or not ok.any():
            continue
        area = PlotArea.around(float(f.min()), float(f.max()), float(min(vals[ok].min(), 0.0)),
                               float(max(vals[ok].max(), 0.0)), y_pad=0.1, height=200.0)
        parts += [svg_open(area, f"Angular momentum in flight {k + 1}"),
                  axes(area, "frame", "H per kg (m²/s)", 3)]
        labels = []
        for name, stroke, dash, label in H_STYLES:
            v = comps[name]
            n = min(v.size, f.size)
            style = f"stroke:{stroke}" + (f";stroke-dasharray:{dash}" if dash else "")
            parts.append(polyline(area, f[:n], v[:n], "spin", style, {"axis": name}))
            if n and np.isfinite(v[n - 1]):
                labels.append((float(area.y_px(v[n - 1])), label))
        for y, (_y0, text) in zip(spread([y for y, _ in labels]), labels):
            parts.append(margin_label(area, y, text))
        onset = as_float(fl.get("onset_frame"))
        if np.isfinite(onset):
            parts.append(vline(area, onset, "event", "spin starts"))
        parts.append(svg_close())
        parts.append(f'<p class="legend">{esc(H_KEY)}</p>')
        finding = fl.get("finding")
        text = finding if finding else (f"Spin kept: the change ({abs(as_float(fl.get('change_deg_per_s'))):.0f}°/s) "
                                        f"is within what sampling and the segment table explain "
                                        f"({as_float(fl.get('threshold_deg_per_s')):.0f}°/s).")
        parts.append(f'<p class="{"finding fix" if finding else "finding"}">{esc(readout.sentence(text))}</p>')
    return "".join(parts) or '<p class="empty">No flight long enough to check its spin.</p>'


def fix_figure(clip) -> str:
    """Center-of-mass height before and after the flight fix, with each flight's advice."""
    fix = clip.get("flight_fix") or {}
    f, before, after = _arr(fix.get("frames")), _arr(fix.get("height_before_m")), _arr(fix.get("height_after_m"))
    n = min(f.size, before.size, after.size)
    if n < 2:
        return '<p class="empty">No flight fix was computed for this clip.</p>'
    f, before, after = f[:n], before[:n], after[:n]
    both = np.concatenate([before, after])
    both = both[np.isfinite(both)]
    area = PlotArea.around(float(f.min()), float(f.max()), float(both.min()), float(both.max()), y_pad=0.08)
    parts = [svg_open(area, "Center of mass height before and after the flight fix"),
             axes(area, "frame", "CoM height (m)"),
             polyline(area, f, before, "body", "stroke:#8a8f94;stroke-dasharray:6 3", {"arc": "before"}),
             polyline(area, f, after, "body", "stroke:#1f4e79", {"arc": "after"})]
    ys = [float(area.y_px(before[-1])), float(area.y_px(after[-1]))]
    for y, text in zip(spread(ys), ("as animated", "fixed")):
        parts.append(margin_label(area, y, text))
    parts.append(svg_close())
    parts.append('<p class="legend"><span class="item"><span class="key dashed"></span>as animated</span>'
                 '<span class="item"><span class="key solid"></span>on the ballistic arc at scene gravity '
                 '(Overlap Flight Fix layer)</span></p>')
    for fl in fix.get("flights") or []:
        parts.append(f'<p class="finding">{esc(readout.sentence(fl.get("advice", "")))}</p>')
    return "".join(parts)


def flight_sections(clip) -> list:
    """(heading, html) sections for the clip's article; empty when the clip has neither."""
    out = []
    if clip.get("spin"):
        out.append(("Spin in flight (angular momentum about the center of mass)", spin_figure(clip)))
    if clip.get("flight_fix"):
        out.append(("Flight arc before and after the fix", fix_figure(clip)))
    return out

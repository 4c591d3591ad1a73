"""The HTML report of analysed clips: plots parse as SVG, geometry matches the data, words match the findings.

Clips are analytic jumps (``jump_curves``) run through the real analysis, so every number the
report shows comes from ``analyse_body`` and the checks compare against those numbers.
"""
import json
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from overlap_assist.core.body_analysis import analyse_body, analysis_to_dict
from overlap_assist.core.body_types import MotionSamples
from overlap_assist.core.constants import STANDARD_GRAVITY_MPS2 as G0
from overlap_assist.core.jump_curves import JumpSpec, jump_events, jump_position
from overlap_assist.report import CAUTION, build_report, write_report
from overlap_assist.report.html_report import height_area
from overlap_assist.report.svg_plot import PlotArea, nice_ticks, spread

G_DOWN = np.array([0.0, 0.0, -G0])
FPS = 24.0


def analysed(spec, fps=FPS, spf=4, arm_late_s=None):
    """(analysis dict after a JSON round trip, whole frames, body heights there)."""
    ev = jump_events(spec)
    frames = np.arange(1.0, 1.0 + ev["duration_s"] * fps + 1e-9, 1.0 / spf)
    pos = jump_position(spec, (frames - 1.0) / fps)
    extra = {}
    if arm_late_s is not None:
        # Arms (10 % of the mass) rise 0.3 m relative to the rest, centred arm_late_s after takeoff.
        t = (frames - 1.0) / fps
        rel = 0.3 / (1 + np.exp(-(t - ev["takeoff_s"] - arm_late_s) / 0.03))
        extra = dict(body_source="com", arm_com_m=pos + np.stack([0 * t, 0 * t, rel], 1), rest_com_m=pos,
                     arm_mass_fraction=0.1)
    res = analyse_body(MotionSamples(frames, fps, pos, G_DOWN, **extra))
    whole = np.isclose(frames, np.round(frames))
    return json.loads(json.dumps(analysis_to_dict(res))), frames[whole], pos[whole, 2]


def make_clip(name, spec, n_chains=0, **kw):
    analysis, frames, z = analysed(spec, **kw)
    clip = {"name": name, "analysis": analysis,
            "body_height": {"frames": frames.tolist(), "height_m": z.tolist()}}
    if n_chains:
        rng = np.random.default_rng(0)
        clip["chains"] = [{"chain": f"strand{k}", "frames": frames.tolist(),
                           "tip_swing_deg": (20 * rng.random() * np.abs(np.sin(frames / (3 + k)))).tolist(),
                           "keys_before": 480, "keys_after": 61 + k} for k in range(n_chains)]
    return clip


@pytest.fixture(scope="module")
def good():
    return make_clip("good_jump", JumpSpec(forward_mps=1.2), n_chains=2)


@pytest.fixture(scope="module")
def floaty():
    return make_clip("floaty_jump", JumpSpec(flight_gravity_mps2=0.45 * G0))


def svgs(html):
    return re.findall(r"<svg\b.*?</svg>", html, flags=re.S)


def article(html, index):
    m = re.search(rf'<article class="clip" id="clip-{index}">(.*?)</article>', html, flags=re.S)
    assert m, f"no article for clip {index}"
    return m.group(1)


def section(html, heading):
    m = re.search(rf"{heading}</h3>(.*?)</section>", html, flags=re.S)
    assert m, f"no section {heading}"
    return m.group(1)


def by_class(root, tag, cls):
    return [e for e in root.iter(tag) if cls in (e.get("class") or "").split()]


def points(polyline_el):
    return np.array([[float(v) for v in p.split(",")] for p in polyline_el.get("points").split()])


def test_one_svg_per_plot_and_every_svg_parses(good, floaty):
    html = build_report([good, floaty])
    plots = svgs(html)
    # good: load, height, chains; floaty (no chains): load, height.
    assert len(plots) == 5
    assert html.count("<svg") == 5
    for text in plots:
        root = ET.fromstring(text)
        assert root.tag == "svg" and root.get("viewBox")


@pytest.mark.parametrize("which", ["good", "floaty"])
def test_plot_elements_match_the_analysis(which, good, floaty):
    clip = {"good": good, "floaty": floaty}[which]
    a = clip["analysis"]
    n_fl, n_ch = len(a["flights"]), len(clip.get("chains", []))
    plots = [ET.fromstring(s) for s in svgs(build_report([clip]))]
    assert len(plots) == 2 + (n_ch > 0)
    load, height = plots[0], plots[1]
    assert n_fl == 1
    assert len(by_class(load, "polyline", "load")) == 1
    assert len(by_class(load, "rect", "phase")) == len(a["phases"]) > 5
    assert len(by_class(load, "line", "ref")) == 2
    assert len(by_class(load, "line", "event")) == 3 * n_fl
    assert {"takeoff", "apex", "touchdown"} <= {t.text for t in load.iter("text")}
    assert len(by_class(height, "polyline", "body")) == 1
    assert len(by_class(height, "polyline", "parabola")) == n_fl
    assert len(by_class(height, "circle", "apex-dot")) == n_fl
    # The scene-gravity comparison arc is drawn only for a flight that is not ballistic.
    assert len(by_class(height, "polyline", "ballistic")) == (n_fl if which == "floaty" else 0)
    if n_ch:
        chains = plots[2]
        assert len(by_class(chains, "polyline", "chain")) == n_ch
        labels = {t.text for t in chains.iter("text")}
        assert all(ch["chain"] in labels for ch in clip["chains"])


@pytest.mark.parametrize("spec, fps", [(JumpSpec(forward_mps=1.2), 24.0),
                                       (JumpSpec(flight_gravity_mps2=0.45 * G0), 24.0),
                                       (JumpSpec(flight_gravity_mps2=1.6 * G0), 30.0)])
def test_parabola_passes_through_the_body_height_at_the_apex(spec, fps):
    clip = make_clip("jump", spec, fps=fps)
    html = build_report([clip])
    height = ET.fromstring(svgs(html)[1])
    (para,) = by_class(height, "polyline", "parabola")
    pts = points(para)
    area = height_area(clip)
    fl = clip["analysis"]["flights"][0]
    bh = clip["body_height"]
    for key in ("apex_frame", "takeoff_frame"):
        x_px = float(area.x_px(fl[key]))
        drawn = np.interp(x_px, pts[:, 0], pts[:, 1])
        measured = float(area.y_px(np.interp(fl[key], bh["frames"], bh["height_m"])))
        assert abs(drawn - measured) < 1.0, (key, drawn, measured)
    # The parabola spans the flight, takeoff to touchdown.
    assert pts[0, 0] == pytest.approx(float(area.x_px(fl["takeoff_frame"])), abs=0.01)
    assert pts[-1, 0] == pytest.approx(float(area.x_px(fl["touchdown_frame"])), abs=0.01)


def test_floaty_findings_give_retiming_in_frames_and_good_reads_clean(good, floaty):
    html = build_report([good, floaty])
    good_words = section(article(html, 1), "Findings")
    floaty_words = section(article(html, 2), "Findings")
    fl = floaty["analysis"]["flights"][0]
    assert "floaty" in floaty_words
    assert f"{fl['gravity_ratio']:.2f} g" in floaty_words
    m = re.search(r"[Ss]horten the hang by (\d+) frames for this apex, or raise the apex to ([\d.]+) m", floaty_words)
    assert m, floaty_words
    assert int(m.group(1)) == round(abs(fl["retime_frames"])) >= 5
    assert float(m.group(2)) == pytest.approx(fl["apex_for_hang_time_m"], abs=0.006)
    assert "to fix" in floaty_words and "No problems found" not in floaty_words
    assert "No problems found" in good_words
    assert "floaty" not in good_words and "hang by" not in good_words
    assert "ballistic" in good_words
    land = good["analysis"]["landings"][0]
    assert f"peak load {land['peak_load_g']:.1f} g" in good_words


def test_easing_and_late_arm_swing_are_put_in_animator_terms():
    easing = make_clip("ease", JumpSpec(forward_mps=1.2, flight_forward_accel_mps2=-1.5))
    late = make_clip("late", JumpSpec(), arm_late_s=0.08)
    html = build_report([easing, late])
    ease_words = section(article(html, 1), "Findings")
    late_words = section(article(html, 2), "Findings")
    assert "forward speed slows in the air" in ease_words
    assert "ballistic flight keeps it constant" in ease_words
    fl = late["analysis"]["flights"][0]
    assert fl["late_arm_swing"] is True
    assert f"{fl['arm_swing_offset_frames']:.1f} frames after takeoff" in late_words
    assert f"{100 * fl['arm_swing_body_drop_m']:.1f} cm" in late_words
    assert "forward speed" not in late_words


def test_clip_without_flight_chains_or_body_height_still_reports():
    frames = np.arange(1, 60, 0.25)
    t = (frames - 1) / 24
    pos = np.stack([t, 0 * t, 1 + 0.05 * np.sin(2 * np.pi * t)], 1)
    a = analysis_to_dict(analyse_body(MotionSamples(frames, 24.0, pos, G_DOWN)))
    html = build_report([{"name": "sway", "analysis": a, "chains": []}, {}])
    plots = svgs(html)
    assert len(plots) == 1  # only the load curve of the first clip
    load = ET.fromstring(plots[0])
    assert by_class(load, "line", "event") == []
    assert len(by_class(load, "polyline", "load")) == 1
    assert "no flight found" in html
    assert "No body height" in html and "No chains" in html
    assert "clip 2" in html  # unnamed clip
    assert "No clips were given" in build_report([])


def test_key_counts_and_reduction_per_chain(good):
    body = section(build_report([good]), "Chains: tip swing and keys")
    for ch in good["chains"]:
        pct = 100 * (1 - ch["keys_after"] / ch["keys_before"])
        assert re.search(rf"<td>{ch['chain']}</td><td>{ch['keys_before']}</td><td>{ch['keys_after']}</td>"
                         rf"<td>{pct:.1f} %</td>", body)


def test_no_network_references_and_only_local_images(good):
    clip = dict(good, images={"contact_sheet": "sheets/contact_sheet.png", "remote": "http://example.org/x.png",
                              "cdn": "//cdn.example.org/y.png"})
    html = build_report([clip])
    assert "http" not in html.lower() and "//cdn" not in html
    assert 'src="sheets/contact_sheet.png"' in html
    assert html.count("<img") == 1


def test_text_is_escaped_everywhere(good):
    clip = json.loads(json.dumps(good))
    clip["name"] = "<b>&"
    clip["chains"][0]["chain"] = '<u>"tail"</u>'
    clip["analysis"]["warnings"] = ["rig <hips> & spine"]
    html = build_report([clip], title="A & <B>")
    assert "<b>" not in html and "<u>" not in html and "<hips>" not in html
    assert "&lt;b&gt;&amp;" in html
    assert "<title>A &amp; &lt;B&gt;</title>" in html
    assert "rig &lt;hips&gt; &amp; spine" in html
    for text in svgs(html):
        root = ET.fromstring(text)  # escaped chain names keep the SVG well-formed
    assert '<u>"tail"</u>' in {t.text for t in root.iter("text")}


def test_caution_and_sources_are_visible(good):
    html = build_report([good])
    assert html.count(f'<p class="caution"><strong>Caution.</strong> {CAUTION}.</p>') == 2
    assert "not biomechanical or medical assessment" in CAUTION
    footer = html[html.index("<footer>"):]
    for name in ("Savitzky", "Bosco", "gT²/8", "Dempster", "Winter", "de Leva", "McMahon"):
        assert name in footer


def test_write_report_replaces_the_file_atomically(tmp_path, good):
    out = tmp_path / "report.html"
    out.write_text("old")
    write_report(out, [good])
    assert out.read_text(encoding="utf-8") == build_report([good])
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]


def test_scales_ticks_and_label_spreading():
    area = PlotArea(10.0, 50.0, -1.0, 3.0)
    assert float(area.x_px(10.0)) == pytest.approx(area.left)
    assert float(area.x_px(50.0)) == pytest.approx(area.width - area.right)
    assert float(area.y_px(3.0)) == pytest.approx(area.top)
    assert float(area.y_px(-1.0)) == pytest.approx(area.height - area.bottom)
    ticks = nice_ticks(-0.13, 4.2, 5)
    steps = np.diff(ticks)
    assert ticks[0] >= -0.13 and ticks[-1] <= 4.2 and np.allclose(steps, steps[0])
    assert steps[0] in (0.5, 1.0)
    ys = spread([100.0, 101.0, 50.0, 102.0], gap=13.0)
    order = np.argsort([100.0, 101.0, 50.0, 102.0], kind="stable")
    assert np.all(np.diff(np.array(ys)[order]) >= 13.0 - 1e-9)
    with pytest.raises(ValueError):
        PlotArea(1.0, 1.0, 0.0, 1.0)


def test_the_plotted_load_reaches_the_sub_frame_peak_the_findings_quote(good):
    # Before: the findings said "peak load 5.0 g" while the plotted curve (whole frames only) peaked
    # lower. Here the landing's peak lies between whole frames, above every per-frame value, as a
    # sub-frame sample of a sharp landing does.
    from overlap_assist.report.html_report import load_area
    clip = json.loads(json.dumps(good))
    a = clip["analysis"]
    land = a["landings"][0]
    land["peak_frame"] = float(np.floor(land["frame"])) + 1.25
    land["peak_load_g"] = max(a["load_factor"]) + 1.0
    html = build_report([clip])
    load = ET.fromstring(svgs(html)[0])
    (line,) = by_class(load, "polyline", "load")
    pts = points(line)
    area = load_area(clip)
    top = pts[np.argmin(pts[:, 1])]
    assert top[1] == pytest.approx(float(area.y_px(land["peak_load_g"])), abs=0.01)
    assert top[0] == pytest.approx(float(area.x_px(land["peak_frame"])), abs=0.01)
    assert np.all(np.diff(pts[:, 0]) > 0)  # still one curve, left to right
    assert f"peak load {land['peak_load_g']:.1f} g" in section(article(html, 1), "Findings")


def test_the_tip_swing_plot_is_readable(good):
    # Before: names sat on the curves' peaks, no takeoff/touchdown lines, no word on what swing is.
    from overlap_assist.report.html_report import chain_area
    html = build_report([good])
    chains = ET.fromstring(svgs(html)[2])
    area = chain_area(good)
    fl = good["analysis"]["flights"][0]
    events = {e.get("class"): float(e.get("x1")) for e in by_class(chains, "line", "event")}
    assert events == pytest.approx({"event takeoff": float(area.x_px(fl["takeoff_frame"])),
                                    "event touchdown": float(area.x_px(fl["touchdown_frame"]))}, abs=0.01)
    names = [t for t in chains.iter("text") if t.text in {ch["chain"] for ch in good["chains"]}]
    assert len(names) == len(good["chains"])
    right_edge = area.width - area.right
    assert all(float(t.get("x")) > right_edge for t in names)  # in the margin, clear of every curve
    ys = sorted(float(t.get("y")) for t in names)
    assert np.all(np.diff(ys) >= 13.0 - 1e-6)  # and clear of each other
    assert "tip swing from the animated pose (°)" in {t.text for t in chains.iter("text")}
    assert "measured from the animated pose" in section(article(html, 1), "Chains: tip swing and keys")

"""Report figures of the spin check and the flight fix (the page is built, not rendered)."""
import re

from overlap_assist.report.flight_figures import fix_figure, spin_figure
from overlap_assist.report.html_report import build_report


def _clip():
    frames = [10.0 + k for k in range(8)]
    return {
        "name": "hop",
        "analysis": {"fps": 24.0, "gravity_mps2": 9.80665, "frames": frames, "load_factor": [0.0] * 8,
                     "flights": [], "warnings": []},
        "spin": [{"frames": frames, "h_body_m2ps_per_kg": {"left": [0, 0, 0, 0.1, 0.2, 0.2, 0.2, 0.2],
                                                           "forward": [0.0] * 8, "up": [0.0] * 8},
                  "finding": "the body starts turning forward at frame 13 with nothing to push against: +140°/s <x>",
                  "onset_frame": 13.0, "change_deg_per_s": 140.0, "threshold_deg_per_s": 25.0}],
        "flight_fix": {"frames": frames, "height_before_m": [1.0, 1.2, 1.3, 1.35, 1.35, 1.3, 1.2, 1.0],
                       "height_after_m": [1.0, 1.25, 1.4, 1.45, 1.45, 1.4, 1.25, 1.0],
                       "flights": [{"advice": "apex kept on the ballistic arc; retime the contacts"}]},
    }


def test_spin_plot_has_three_components_and_the_finding_escaped():
    html = spin_figure(_clip())
    assert len(re.findall(r'data-axis="(left|forward|up)"', html)) == 3
    assert "+140°/s &lt;x&gt;" in html and "spin starts" in html


def test_fix_plot_shows_both_arcs_and_the_advice():
    html = fix_figure(_clip())
    assert 'data-arc="before"' in html and 'data-arc="after"' in html
    assert "retime the contacts" in html


def test_report_gets_the_sections_only_when_the_clip_has_them():
    page = build_report([_clip()])
    assert "Spin in flight" in page and "Flight arc before and after the fix" in page
    bare = _clip()
    del bare["spin"], bare["flight_fix"]
    page = build_report([bare])
    assert "Spin in flight" not in page and "Flight arc before" not in page
    assert "No spin check" in spin_figure(bare) and "No flight fix" in fix_figure(bare)

"""Named defaults and limits, each with its unit and why it has this value.

The Blender layer takes its UI defaults from here, so UI and core cannot drift apart.
"""

CAUTION = "Figures are for animation plausibility only, not biomechanical or medical assessment"
"""Shown wherever figures are shown (panel, CLI, JSON, report)."""

STANDARD_GRAVITY_MPS2 = 9.80665
"""Standard acceleration of free fall (3rd CGPM, 1901)."""

SAMPLES_PER_FRAME = 8
"""Sub-frame samples per frame of the feet around a contact change (takeoff/touchdown need
sub-frame timing; the body itself is sampled at whole frames: keyed samples are what the
animator set, the interpolation between them is not motion)."""

SMOOTHING_WINDOW_FRAMES = 1.0
"""Savitzky–Golay window span in frames. Keyed animation is smooth, so a short window keeps
events sharp; motion capture wants 2–4 frames (about a 6 Hz low-pass, Winter 2009, from memory)."""

SMOOTHING_ORDER = 2
"""Savitzky–Golay polynomial degree: quadratic is exact for ballistic flight (constant acceleration)."""

FLIGHT_LOAD_MAX = 0.85
"""Load factor (g) below which the body may be airborne. Force plates use a small fixed
threshold (10 N, Pérez-Castilla et al. 2021), but an animated flight can be floaty (a 0.4 g
flight reads 0.6 g on this scale), so the threshold is high and a second test tells flight from
unweighting: see MIN_TAKEOFF_SPEED_MPS and SURE_FLIGHT_LOAD. Event times are refined by the
midpoint rule in jump_phases, so the threshold does not bias them."""

MIN_TAKEOFF_SPEED_MPS = 0.5
"""A low-load interval that begins while the body rises faster than this (m/s) is a flight;
unweighting begins from rest, and rising out of a landing crouch is slower than this in keyed
clips (common practice). A 5 cm hop already leaves the ground at 1 m/s (v = sqrt(2 g h))."""

SURE_FLIGHT_LOAD = 0.3
"""A low-load interval whose median load is below this (g) is a flight even without upward
speed at its start (stepping off a ledge)."""

MIN_FLIGHT_S = 0.06
"""Shortest airborne interval counted as a flight (s): shorter dips are contact wobble."""

ONSET_LOAD_DROP = 0.05
"""Unweighting starts when the load falls this far below 1 g (5 % of body weight, Meylan et al. 2011)."""

FLOATY_RATIO = 0.8
"""Implied/scene gravity below this reads as floaty (common practice: viewers notice ~20 %)."""

HEAVY_RATIO = 1.25
"""Implied/scene gravity above this reads as heavy (common practice)."""

HORIZONTAL_EASE_MPS2 = 0.5
"""|Horizontal acceleration| in flight above this (m/s^2) is reported as easing: ballistic flight has none."""

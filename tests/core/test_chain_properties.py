"""Property tests of the chain solver over the UI ranges of every slider (hypothesis).

What must hold for any setting, frame rate and sub-step count, under violent pivot motion:
finite unit directions, links that keep their length, bit-identical repeats, the bend cone,
link ends outside colliders (penetration < 1 % of the radius), and -- for a single link, where
the model conserves energy -- no energy gain once the body holds still (damping >= 0).
"""
import math

import numpy as np
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from overlap_assist.core.chain_solver import simulate_chains
from overlap_assist.core.chain_types import ChainInput, ChainSettings, Colliders

G0 = 9.80665
GRAVITY = np.array([0.0, 0.0, -G0])
FPS = st.sampled_from([12, 24, 25, 30, 48, 60, 120, 240])

ui_settings = st.builds(
    ChainSettings,
    frequency_hz=st.floats(0.0, 10.0),
    damping_ratio=st.floats(0.0, 2.0),
    tip_looseness=st.floats(0.0, 1.0),
    gravity_scale=st.floats(0.0, 3.0),
    body_response=st.floats(0.0, 3.0),
    air_drag=st.floats(0.0, 10.0),
    bend_limit_rad=st.floats(math.radians(5.0), math.pi),
    collision_radius_m=st.floats(0.0, 0.03),
    substeps=st.integers(1, 16),
)
PROPS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def violent_chain(seed, n_frames, n_links, hold_from=None):
    """Pivot jitter of +-4 cm per frame (accelerations of thousands of m/s^2 at high frame
    rates) and targets that tumble, inside a 0.15 m box around the origin."""
    rng = np.random.default_rng(seed)
    pivot = np.clip(np.cumsum(rng.normal(0.0, 0.04, (n_frames, 3)), axis=0), -0.15, 0.15)
    dirs = np.cumsum(rng.normal(0.0, 0.5, (n_frames, n_links, 3)), axis=0) + [0.0, 0.0, -1.0]
    if hold_from is not None:
        pivot[hold_from:] = pivot[hold_from]
        dirs[hold_from:] = dirs[hold_from]
    dirs /= np.linalg.norm(dirs, axis=-1, keepdims=True)
    lengths = rng.uniform(0.02, 0.3, n_links)
    return ChainInput(pivot, dirs, lengths)


@PROPS
@given(ui_settings, ui_settings, FPS, st.integers(0, 2**31 - 1), st.integers(1, 5))
def test_any_setting_stays_finite_bounded_limited_and_repeatable(s1, s2, fps, seed, n_links):
    chains = [violent_chain(seed, 30, n_links), violent_chain(seed + 1, 30, 3)]
    motion = simulate_chains(chains, [s1, s2], GRAVITY, 1.0 / fps)
    again = simulate_chains(chains, [s1, s2], GRAVITY, 1.0 / fps)
    for chain, s, d, tips, d2 in zip(chains, (s1, s2), motion.dirs, motion.tip_positions_m, again.dirs):
        assert np.all(np.isfinite(d)) and np.all(np.isfinite(tips))
        assert np.max(np.abs(np.linalg.norm(d, axis=-1) - 1.0)) < 1e-9
        reach = np.linalg.norm(tips[:, -1] - chain.pivot_pos_m, axis=-1)
        assert np.all(reach <= chain.lengths_m.sum() + 1e-9)
        swing = np.arccos(np.clip(np.einsum("fli,fli->fl", d, chain.target_dirs), -1.0, 1.0))
        assert swing.max() <= s.bend_limit_rad + 1e-7
        assert np.array_equal(d, d2)
    for state in motion.final_states:
        assert np.all(np.isfinite(state.dir_rates_per_s))


def single_link_energy(state, target, length, s):
    """Energy per unit mass of a rod pivoted at a still point: kinetic L^2 |d'|^2 / 6, gravity
    -(L/2) gs g . d, spring I k U(angle) with I = L^2/3 and U the integral of the solver's
    spring law (2 tan(a/2) up to 120 degrees, 4 sin(a) beyond; see chain_setup.spring_moment)."""
    d, rate = state.dirs[0], state.dir_rates_per_s[0]
    k = (2.0 * math.pi * s.frequency_hz) ** 2
    a = math.acos(max(-1.0, min(1.0, float(d @ target))))
    if a <= 2.0 * math.pi / 3.0:
        u = -4.0 * math.log(math.cos(a / 2.0))
    else:
        u = 4.0 * math.log(2.0) + 4.0 * (-0.5 - math.cos(a))
    kinetic = length**2 * float(rate @ rate) / 6.0
    gravity = -0.5 * length * s.gravity_scale * float(GRAVITY @ d)
    return kinetic + gravity + length**2 / 3.0 * k * u


@PROPS
@given(ui_settings, FPS, st.integers(0, 2**31 - 1))
@example(ChainSettings(frequency_hz=2.0, damping_ratio=0.0, air_drag=0.0), 24, 1)  # undamped edge
@example(ChainSettings(frequency_hz=0.0, damping_ratio=0.0, gravity_scale=3.0, air_drag=0.0), 12, 2)
@example(ChainSettings(frequency_hz=10.0, damping_ratio=0.01, gravity_scale=0.0, air_drag=0.0), 30, 3)
def test_single_link_loses_energy_once_the_body_holds_still(s, fps, seed):
    # Damped (or undamped) motion about a fixed pose and pivot: energy cannot grow (the bend
    # limit and drag only remove energy). Tolerance: 1 % of the energy plus 1e-9 J/kg for the
    # trapezoid's O(h^2) energy error on the nonlinear spring and pendulum.
    hold, n = 12, 60
    full = violent_chain(seed, n, 1, hold_from=hold)
    head = ChainInput(full.pivot_pos_m[: hold + 4], full.target_dirs[: hold + 4], full.lengths_m)
    s = ChainSettings(**{**{f: getattr(s, f) for f in s.__slots__}, "collision_radius_m": 0.0})
    start = simulate_chains([head], [s], GRAVITY, 1.0 / fps).final_states[0]
    end = simulate_chains([full], [s], GRAVITY, 1.0 / fps).final_states[0]
    target, length = full.target_dirs[-1, 0], float(full.lengths_m[0])
    e0 = single_link_energy(start, target, length, s)
    e1 = single_link_energy(end, target, length, s)
    floor = -0.5 * length * s.gravity_scale * G0  # lowest possible gravity energy
    assert e1 - floor <= (e0 - floor) * 1.01 + 1e-9


@PROPS
@given(ui_settings, FPS, st.integers(0, 2**31 - 1), st.integers(1, 5), st.floats(0.03, 0.2),
       st.floats(0.02, 0.1), st.floats(0.0, 0.5))
def test_link_ends_stay_outside_colliders(s, fps, seed, n_links, sphere_r, capsule_r, ground_gap):
    # Colliders kept clear of the pivot's box (a pivot inside a collider cannot be resolved)
    # and of each other, the ground included, even inflated by the link's thickness (a link
    # end wedged between two overlapping colliders has no place to go); they move every frame.
    n = 30
    lowest = min(-0.2 - sphere_r - 0.05, -0.25 - capsule_r - 0.05)  # lowest collider point
    ground = lowest - 2.0 * s.collision_radius_m - 0.001 - ground_gap
    chain = violent_chain(seed, n, n_links)
    t = np.arange(n) / fps
    sphere = np.stack([0.35 + sphere_r + 0.05 * np.sin(7 * t), 0.05 * np.cos(5 * t), np.full(n, -0.2)], -1)
    cap_a = np.stack([np.full(n, -0.6), -0.3 - capsule_r + 0.03 * np.sin(9 * t), np.full(n, -0.25)], -1)
    cap_b = cap_a + [0.5, 0.0, 0.05]
    coll = Colliders(sphere_centres_m=sphere[:, None], sphere_radii_m=[sphere_r],
                     capsule_a_m=cap_a[:, None], capsule_b_m=cap_b[:, None], capsule_radii_m=[capsule_r],
                     ground_height_m=ground)
    motion = simulate_chains([chain], [s], GRAVITY, 1.0 / fps, colliders=coll)
    tips = motion.tip_positions_m[0]
    thick = s.collision_radius_m
    r = sphere_r + thick
    assert np.all(np.linalg.norm(tips - sphere[:, None], axis=-1) >= r * (1.0 - 0.01))
    ab = cap_b - cap_a
    along = np.clip(np.einsum("fli,fi->fl", tips - cap_a[:, None], ab) / np.einsum("fi,fi->f", ab, ab)[:, None], 0, 1)
    near = cap_a[:, None] + along[..., None] * ab[:, None]
    r = capsule_r + thick
    assert np.all(np.linalg.norm(tips - near, axis=-1) >= r * (1.0 - 0.01))
    # The ground has no radius of its own: 1 % of the link's thickness (or 1 micrometre).
    assert np.all(tips[..., 2] >= ground + thick - max(0.01 * thick, 1e-6))


@PROPS
@given(ui_settings, FPS, st.integers(0, 2**31 - 1), st.integers(1, 5), st.floats(0.03, 0.2),
       st.floats(0.02, 0.1), st.sampled_from([None, -0.3, -0.6]))
def test_collision_broad_phase_skips_only_what_the_projection_would_leave(s, fps, seed, n_links, sphere_r,
                                                                          capsule_r, ground):
    # The cheap pre-test may only skip sub-steps in which the exact projection moves nothing:
    # forcing the projection on every sub-step must give bit-identical motion and contacts.
    import overlap_assist.core.chain_solver as solver

    n = 30
    chains = [violent_chain(seed, n, n_links), violent_chain(seed + 1, n, 3)]
    t = np.arange(n) / fps
    sphere = np.stack([0.2 + sphere_r + 0.05 * np.sin(7 * t), 0.05 * np.cos(5 * t), np.full(n, -0.2)], -1)
    cap_a = np.stack([np.full(n, -0.4), -0.2 - capsule_r + 0.03 * np.sin(9 * t), np.full(n, -0.25)], -1)
    coll = Colliders(sphere_centres_m=sphere[:, None], sphere_radii_m=[sphere_r], capsule_a_m=cap_a[:, None],
                     capsule_b_m=(cap_a + [0.5, 0.0, 0.05])[:, None], capsule_radii_m=[capsule_r],
                     ground_height_m=ground)
    quick = simulate_chains(chains, [s, s], GRAVITY, 1.0 / fps, colliders=coll)
    original = solver._BroadPhase.maybe_inside
    solver._BroadPhase.maybe_inside = lambda self, d, k, s_: True
    try:
        always = simulate_chains(chains, [s, s], GRAVITY, 1.0 / fps, colliders=coll)
    finally:
        solver._BroadPhase.maybe_inside = original
    for a, b in zip(quick.dirs, always.dirs):
        assert np.array_equal(a, b)
    for a, b in zip(quick.contact_counts, always.contact_counts):
        assert np.array_equal(a, b)


def test_chain_operators_dense_and_per_chain_equal_an_explicit_sum():
    # Above _DENSE_TRANSFER_MAX links the parents' load and the link ends come from one small
    # product per chain instead of one block-diagonal product; both must equal the plain sum
    # out[x, c, j] = sum_i rows[x, c, i] blocks[c, i, j] (einsum as the reference).
    import overlap_assist.core.chain_solver as solver

    rng = np.random.default_rng(4)
    for n_chains, n_links in ((3, 4), (40, 6)):   # 12 links: dense; 240: per chain
        blocks = rng.normal(size=(n_chains, n_links, n_links))
        rows = rng.normal(size=(3, n_chains * n_links))
        ref = np.einsum("xci,cij->xcj", rows.reshape(3, n_chains, n_links), blocks).reshape(rows.shape)
        op = solver._along_chains(blocks)
        assert op.ndim == (2 if n_chains * n_links <= solver._DENSE_TRANSFER_MAX else 3)
        np.testing.assert_allclose(solver._times_along_chains(rows, op), ref, rtol=1e-12, atol=1e-12)


@PROPS
@given(FPS, st.integers(0, 2**31 - 1), st.integers(1, 5), st.floats(0.3, 2.0), st.floats(0.5, 10.0))
def test_many_links_take_the_per_chain_products_and_move_the_same(fps, seed, n_links, zeta, freq):
    # The whole solver both ways: the same sums in another order, so equal to rounding as far as
    # the motion lets rounding grow. Tolerance 1e-8: over 200 random damped cases of this violent
    # input the largest difference was 2.5e-10 (measured); colliders are left out because a
    # rounding-level difference can decide whether a link end touches, and then it diverges.
    import overlap_assist.core.chain_solver as solver

    s = ChainSettings(frequency_hz=freq, damping_ratio=zeta, air_drag=1.0)
    chains = [violent_chain(seed + k, 30, n_links) for k in range(3)]
    dense = simulate_chains(chains, [s] * 3, GRAVITY, 1.0 / fps)
    limit = solver._DENSE_TRANSFER_MAX
    solver._DENSE_TRANSFER_MAX = 0
    try:
        per_chain = simulate_chains(chains, [s] * 3, GRAVITY, 1.0 / fps)
    finally:
        solver._DENSE_TRANSFER_MAX = limit
    for a, b in zip(dense.dirs, per_chain.dirs):
        np.testing.assert_allclose(a, b, atol=1e-8)

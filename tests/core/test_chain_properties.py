"""Property tests of the chain solver over the UI ranges of every slider (hypothesis).

What must hold for any setting, frame rate and sub-step count, under violent pivot motion:
finite unit directions, links that keep their length, bit-identical repeats, the bend cone,
link ends outside colliders (penetration < 1 % of the radius), no energy gain of the coupled
chain once the body holds still (damping >= 0), and long chains of short bones on a jumping body.
"""
import math
import os

import numpy as np
from hypothesis import HealthCheck, assume, example, given, settings
from hypothesis import strategies as st

from overlap_assist.core.chain_setup import chain_mechanics
from overlap_assist.core.chain_solver import chain_energy, simulate_chains
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
    thickness_taper=st.floats(0.0, 0.95),
    tip_mass_ratio=st.floats(0.0, 20.0),
)
PROPS = settings(max_examples=int(os.environ.get("OVERLAP_PROPERTY_EXAMPLES", "25")), deadline=None, derandomize=True,
                 suppress_health_check=[HealthCheck.too_slow])


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


def chain_energy_of(state, chain, s):
    """Energy of the undamped model with a still anchor (relative units): kinetic 1/2 u^T M u,
    the load -sum_j b_j gs g . d_j and the joint springs (chain_solver's docstring)."""
    mech = chain_mechanics(chain.lengths_m, s, G0)
    return chain_energy(mech, np.zeros(3), s.gravity_scale * GRAVITY, state.dirs, state.dir_rates_per_s,
                        chain.target_dirs[-1])


@PROPS
@given(ui_settings, FPS, st.integers(0, 2**31 - 1), st.integers(1, 5))
@example(ChainSettings(frequency_hz=2.0, damping_ratio=0.02, air_drag=0.0), 24, 1, 1)  # barely damped
@example(ChainSettings(frequency_hz=0.0, damping_ratio=0.02, gravity_scale=3.0, air_drag=0.0), 24, 2, 4)
@example(ChainSettings(frequency_hz=10.0, damping_ratio=0.01, gravity_scale=0.0, air_drag=0.0), 30, 3, 5)
@example(ChainSettings(frequency_hz=1.0, damping_ratio=0.05, thickness_taper=0.95, air_drag=0.0), 24, 4, 5)
# Cases that gained energy before the energy bound (core.chain_energy's docstring): a negligible
# damping ratio (+5 %), links sliding along their cones (+34 %), a tip mass at 12 and 48 fps.
@example(ChainSettings(frequency_hz=1.0, damping_ratio=0.0, air_drag=1.0, tip_mass_ratio=1.0), 48, 1, 3)
@example(ChainSettings(frequency_hz=1.0, damping_ratio=0.0, air_drag=1.0, tip_mass_ratio=1.0, substeps=1), 12, 1, 3)
@example(ChainSettings(frequency_hz=0.0, damping_ratio=0.0, tip_looseness=0.0, air_drag=1.0, bend_limit_rad=1.5,
                       body_response=0.0, substeps=1), 12, 2, 4)
@example(ChainSettings(frequency_hz=3.0, damping_ratio=0.0, tip_looseness=1.0, gravity_scale=0.0, body_response=0.0,
                       air_drag=1.5, bend_limit_rad=1.0, substeps=1, tip_mass_ratio=1.0), 12, 88, 4)
@example(ChainSettings(frequency_hz=2.0, damping_ratio=3e-276, gravity_scale=0.0, air_drag=0.0, substeps=1), 24, 0, 2)
@example(ChainSettings(frequency_hz=2.0, damping_ratio=0.0, air_drag=2.0, bend_limit_rad=1.0, substeps=1), 12, 2, 5)
def test_chain_loses_energy_once_the_body_holds_still(s, fps, seed, n_links):
    # Damped motion about a fixed pose and anchor: the energy of the coupled chain cannot grow
    # (damping, drag and bend stops only remove energy), for every slider value (bend limits, tip
    # mass and thickness taper included), any frame rate and sub-step count, after a violent start.
    # Tolerance: 1 % of the energy above its floor plus 1e-9 (the solver's energy bound allows
    # 0.8 % of it, core.chain_energy.ENERGY_BAND and ENERGY_SLACK). (Undamped, the model conserves energy; how well
    # the step keeps it is checked on exact references in test_chain_dynamics.py: 4e-4 over 10 s
    # for the double pendulum.) Colliders are left out here: a moving collider does work on the
    # chain (test_link_ends_stay_outside_colliders checks contacts).
    # (A damping ratio acts only where something is stiff: without springs and gravity the
    # chain is free and its Rayleigh damping is zero, ChainSettings.damping_ratio.)
    assume((s.damping_ratio > 0.0 and (s.frequency_hz > 0.0 or s.gravity_scale > 0.0)) or s.air_drag > 0.0)
    hold, n = 12, 60
    full = violent_chain(seed, n, n_links, hold_from=hold)
    head = ChainInput(full.pivot_pos_m[: hold + 4], full.target_dirs[: hold + 4], full.lengths_m)
    s = ChainSettings(**{**{f: getattr(s, f) for f in s.__slots__}, "collision_radius_m": 0.0})
    start = simulate_chains([head], [s], GRAVITY, 1.0 / fps).final_states[0]
    # The held part continues from that state (one trajectory: a second run of the whole clip
    # would round differently in its batched products, and a violent start is chaotic enough to
    # end up elsewhere by the time the body holds still).
    tail = ChainInput(full.pivot_pos_m[hold + 3:], full.target_dirs[hold + 3:], full.lengths_m)
    end = simulate_chains([tail], [s], GRAVITY, 1.0 / fps, initial_states=[start]).final_states[0]
    mech = chain_mechanics(full.lengths_m, s, G0)
    floor = -float(np.sum(mech["load"])) * s.gravity_scale * G0  # lowest possible load energy
    e0 = chain_energy_of(start, full, s) - floor
    e1 = chain_energy_of(end, full, s) - floor
    assert e1 <= e0 * 1.01 + 1e-9


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


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(15, 30), FPS, st.integers(0, 2**31 - 1), ui_settings)
def test_long_chains_on_a_jumping_body_stay_finite(n_links, fps, seed, s):
    # 15-30 short bones (2-4 cm) on a pivot that crouches, jumps (ballistic) and lands hard within
    # a few frames: the coupled chain's highest modes are fast, the landing is a spike of load.
    n = 40
    t = np.arange(n) / fps
    t_off, t_land = 10 / fps, 30 / fps
    z = np.where(t < t_off, -0.5 * 30.0 * t**2,
                 np.where(t < t_land, -0.5 * 30.0 * t_off**2 + 3.0 * (t - t_off) - 0.5 * G0 * (t - t_off) ** 2, 0.0))
    pivot = np.stack([0.8 * t, np.zeros(n), z], -1)
    rng = np.random.default_rng(seed)
    dirs = np.tile([0.0, 0.3, -1.0], (n, n_links, 1)) / math.hypot(0.3, 1.0)
    chain = ChainInput(pivot, dirs, rng.uniform(0.02, 0.04, n_links))
    motion = simulate_chains([chain], [s], GRAVITY, 1.0 / fps)
    assert np.all(np.isfinite(motion.dirs[0])) and np.all(np.isfinite(motion.tip_positions_m[0]))
    assert np.max(np.abs(np.linalg.norm(motion.dirs[0], axis=-1) - 1.0)) < 1e-9


@PROPS
@given(ui_settings, FPS, st.integers(0, 2**31 - 1), st.integers(1, 5), st.floats(0.03, 0.2), st.floats(0.02, 0.1),
       st.floats(-0.6, 0.0))
def test_collision_broad_phase_skips_only_what_the_projection_would_leave(s, fps, seed, n_links, sphere_r, capsule_r,
                                                                         ground_m):
    # The solver's cheap pre-check (chain_solver._BroadPhase) skips the exact collider projection
    # where no link end can be inside; forcing the projection on every sub-step must give the same
    # motion bit for bit (colliders near the chain, so both contacts and near misses occur).
    import overlap_assist.core.chain_solver as solver

    n = 30
    chain = violent_chain(seed, n, n_links)
    t = np.arange(n) / fps
    sphere = np.stack([0.1 + 0.1 * np.sin(7 * t), 0.05 * np.cos(5 * t), np.full(n, -0.3)], -1)
    cap_a = np.stack([np.full(n, -0.4), -0.2 + 0.03 * np.sin(9 * t), np.full(n, -0.25)], -1)
    coll = Colliders(sphere_centres_m=sphere[:, None], sphere_radii_m=[sphere_r],
                     capsule_a_m=cap_a[:, None], capsule_b_m=(cap_a + [0.5, 0.0, 0.05])[:, None],
                     capsule_radii_m=[capsule_r], ground_height_m=ground_m)
    fast = simulate_chains([chain], [s], GRAVITY, 1.0 / fps, colliders=coll)
    original = solver._BroadPhase.maybe_inside
    solver._BroadPhase.maybe_inside = lambda self, d, k, s_frac: True
    try:
        exact = simulate_chains([chain], [s], GRAVITY, 1.0 / fps, colliders=coll)
    finally:
        solver._BroadPhase.maybe_inside = original
    assert np.array_equal(fast.dirs[0], exact.dirs[0])
    assert np.array_equal(fast.contact_counts[0], exact.contact_counts[0])
    assert np.array_equal(fast.final_states[0].dir_rates_per_s, exact.final_states[0].dir_rates_per_s)

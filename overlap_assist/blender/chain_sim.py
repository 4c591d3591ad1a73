"""Chains on the rig → core solver → per-frame rotation offsets of the chain bones.

Sampling reads the *animated* pose: the live preview is held off and the baked layer muted
while sampling, so the solver never feeds on its own output. Everything is in metres and
seconds at the core boundary; frames are whole frames of the scene.
"""
import contextlib
from dataclasses import dataclass

import numpy as np

from ..core.chain_solver import simulate_chains
from ..core.chain_types import ChainInput, Colliders
from ..core.errors import InputError, InvalidChainError, OverlapAssistError
from ..core.rotations import quat_from_matrix
from . import chain_check, frame_guard
from .sample_body import gravity_mps2

from .bake_layer import BAKE_TRACK_NAME as BAKE_TRACK


@dataclass
class SampledRig:
    """Animated motion of an armature's chains and colliders over whole frames."""
    frames: np.ndarray             # (n,)
    chain_names: list              # chain item names, in order
    bone_names: list               # per chain: list of bone names
    inputs: list                   # per chain: ChainInput
    world_rot: list                # per chain: (n, n_links, 4) animated armature-space rotations (w, x, y, z)
    object_inv: np.ndarray         # (n, 3, 3) inverse of the object's world 3x3 (world -> armature directions)
    basis_rot: list                # per chain: (n, n_links, 4) animated pose-basis rotations (w, x, y, z)
    colliders: Colliders
    gravity_mps2: np.ndarray
    dt_s: float
    extra: tuple = None            # (frames, heads, tails) in scene units of ``extra_bones``, for the body analysis


def chain_problem(obj, chain):
    """A line saying what is wrong with ``chain`` on ``obj`` (None if it can be simulated)."""
    return chain_check.path_problem(obj, chain.bone_names())


def chain_notes(obj, chain):
    """Lines saying which bone drives each chain bone where constraints sit in between (or why the
    chain cannot be keyed); empty on a plain rig."""
    from . import rig_drive
    try:
        return [d.note() for d in rig_drive.resolve_chain(obj, chain.bone_names()) if d.note()]
    except OverlapAssistError as exc:
        return [str(exc)]


def active_chains(obj, names=None):
    """Chains to simulate: unmuted, optionally only those named; problems raise a clear error."""
    chains = [c for c in obj.overlap_assist.chains if not c.mute and (names is None or c.name in names)]
    if not chains:
        raise InputError(f"'{obj.name}' has no chains to simulate: select chain bones and use Add Chains from Selection")
    chain_check.check_chains(obj, chains)
    return chains


@contextlib.contextmanager
def animated_pose_only(obj):
    """Hold the preview off and mute the baked layer while sampling the animated pose."""
    from . import bake_layer
    ad = obj.animation_data
    track = ad.nla_tracks.get(BAKE_TRACK) if ad else None
    was_muted = track.mute if track else None
    if track:
        track.mute = True
        bake_layer.restore_static_rotations(obj, bake_layer.unbaked_static_rotations(obj))
    with frame_guard.held():
        try:
            yield
        finally:
            if track:
                track.mute = was_muted


def run_to_end(steps, progress=None):
    """Drive a step generator (yields fractions done, returns a result) to its end."""
    try:
        while True:
            fraction = next(steps)
            if progress is not None:
                progress(fraction)
    except StopIteration as done:
        return done.value


def sample_rig(obj, scene, chains, frame_start, frame_end, progress=None, extra_bones=()) -> SampledRig:
    """Sample chain bones and collider bones at every whole frame (restores the current frame).

    ``extra_bones`` are read in the same pass (heads and tails in ``SampledRig.extra``), so the
    body analysis can reuse it instead of stepping through the frames again."""
    return run_to_end(sample_rig_steps(obj, scene, chains, frame_start, frame_end, extra_bones=extra_bones),
                      progress)


def sample_rig_steps(obj, scene, chains, frame_start, frame_end, every=16, extra_bones=()):
    """:func:`sample_rig` as a generator: yields the fraction done every ``every`` frames and
    returns the SampledRig. Closing it early (a cancelled bake) restores the frame and the layer."""
    if frame_end <= frame_start:
        raise InputError(f"frame range {frame_start}-{frame_end} is empty: set an end frame after the start frame")
    chain_check.check_chains(obj, chains)   # stored chains may name renamed or deleted bones
    settings = obj.overlap_assist
    scale = scene.unit_settings.scale_length
    frames = np.arange(frame_start, frame_end + 1, dtype=float)
    chain_bones = [c.bone_names() for c in chains]
    colliders = [c for c in settings.colliders if c.bone in obj.data.bones]
    bad = [c.bone for c in settings.colliders if c.bone not in obj.data.bones]
    if bad:
        raise InputError(f"collider bone{'s' if len(bad) > 1 else ''} {', '.join(bad)} not found: "
                         "pick existing bones or remove those colliders")
    pbones = obj.pose.bones
    index = {b.name: i for i, b in enumerate(pbones)}
    ancestors = {a.name for names in chain_bones for n in names for a in obj.data.bones[n].parent_recursive}
    needed = sorted({n for names in chain_bones for n in names} | {c.bone for c in colliders} | ancestors | set(extra_bones))
    idx = np.array([index[n] for n in needed], dtype=int)
    pos = {n: i for i, n in enumerate(needed)}
    lengths = np.array([obj.data.bones[n].length for n in needed])
    nb = len(pbones)
    buf = np.empty(nb * 16, dtype=np.float32)
    mats = np.empty((frames.size, idx.size, 4, 4))
    pose_lin = np.empty((frames.size, idx.size, 3, 3))
    object_lin = np.empty((frames.size, 3, 3))
    basis = np.empty((frames.size, idx.size, 3, 3))
    saved = (scene.frame_current, scene.frame_subframe)
    with animated_pose_only(obj):
        try:
            for k, f in enumerate(frames):
                scene.frame_set(int(f))
                pbones.foreach_get("matrix", buf)
                local = buf.reshape(nb, 4, 4).transpose(0, 2, 1)[idx].astype(float)
                world = np.array(obj.matrix_world, dtype=float)
                mats[k] = world @ local
                pose_lin[k], object_lin[k] = local[:, :3, :3], world[:3, :3]
                pbones.foreach_get("matrix_basis", buf)
                basis[k] = buf.reshape(nb, 4, 4).transpose(0, 2, 1)[idx, :3, :3]
                if k % every == every - 1:
                    yield (k + 1) / frames.size
        finally:
            scene.frame_set(saved[0], subframe=saved[1])
    _check_uniform_scale(obj, chain_bones, needed, pose_lin, frames)
    heads = mats[:, :, :3, 3] * scale
    y_axes = mats[:, :, :3, 1]
    tails = heads + y_axes * lengths[None, :, None] * scale
    inputs, world_rot, basis_rot = [], [], []
    for names in chain_bones:
        sel = [pos[n] for n in names]
        y = y_axes[:, sel]
        seg_len = np.linalg.norm(tails[0, sel] - heads[0, sel], axis=-1)
        inputs.append(ChainInput(pivot_pos_m=heads[:, sel[0]],
                                 target_dirs=y / np.linalg.norm(y, axis=-1, keepdims=True),
                                 lengths_m=seg_len))
        lin = pose_lin[:, sel]   # armature space: rotation x uniform scale (checked above)
        world_rot.append(quat_from_matrix(lin / np.linalg.norm(lin[..., :, 1], axis=-1)[..., None, None]))
        basis_rot.append(quat_from_matrix(basis[:, sel]))
    spheres = [c for c in colliders if c.shape == "SPHERE"]
    capsules = [c for c in colliders if c.shape == "CAPSULE"]
    n = frames.size

    def stack(items, arr):
        return np.stack([arr[:, pos[c.bone]] for c in items], axis=1) if items else np.zeros((n, 0, 3))

    coll = Colliders(
        sphere_centres_m=stack(spheres, 0.5 * (heads + tails)),
        sphere_radii_m=np.array([c.radius * scale for c in spheres]),
        capsule_a_m=stack(capsules, heads), capsule_b_m=stack(capsules, tails),
        capsule_radii_m=np.array([c.radius * scale for c in capsules]),
        ground_height_m=settings.ground_height * scale if settings.use_ground else None)
    fps = scene.render.fps / scene.render.fps_base
    extra = None
    if extra_bones:
        world_heads = mats[:, :, :3, 3]
        world_tails = world_heads + y_axes * lengths[None, :, None]
        extra = (frames, {n: world_heads[:, pos[n]] for n in extra_bones}, {n: world_tails[:, pos[n]] for n in extra_bones})
    return SampledRig(frames=frames, chain_names=[c.name for c in chains], bone_names=chain_bones, inputs=inputs,
                      world_rot=world_rot, object_inv=np.linalg.inv(object_lin), basis_rot=basis_rot, colliders=coll,
                      gravity_mps2=gravity_mps2(scene, settings.body.gravity_source), dt_s=1.0 / fps, extra=extra)


def _to_armature(object_inv, dirs):
    """World directions (n, links, 3) -> unit armature-space directions (the object may scale unevenly)."""
    out = np.einsum('fij,flj->fli', object_inv, dirs)
    return out / np.linalg.norm(out, axis=-1, keepdims=True)


def solve(sampled: SampledRig, chain_settings):
    """Run the solver; returns (ChainMotion, offsets per chain (n, n_links, 4) in the bones' local frames).

    The solver works in world space (gravity, colliders, lengths as seen); the offsets are found in
    armature space, where the pose is rotations only, from the simulated directions mapped back
    through the object's matrix: exact also when the object is scaled unevenly.
    """
    from ..core.swing import swing_offsets
    motion = simulate_chains(sampled.inputs, chain_settings, sampled.gravity_mps2, sampled.dt_s, sampled.colliders)
    offsets = [swing_offsets(rot, _to_armature(sampled.object_inv, inp.target_dirs),
                             _to_armature(sampled.object_inv, dirs))
               for rot, inp, dirs in zip(sampled.world_rot, sampled.inputs, motion.dirs)]
    return motion, offsets


UNIFORM_TOLERANCE = 1e-4
"""Largest relative spread of a bone's armature-space axis lengths still taken as uniform scale
(float32 matrices round at ~1e-7)."""


def _check_uniform_scale(obj, chain_bones, needed, pose_lin, frames):
    """Refuse chains whose bones (or their parents) are scaled unevenly in armature space: a rotation
    offset would then bend their direction by a different angle than simulated."""
    norms = np.linalg.norm(pose_lin, axis=-2)                     # (n, bones, 3) axis lengths
    spread = (norms.max(axis=-1) - norms.min(axis=-1)) / norms.max(axis=-1)
    gram = np.einsum('fbji,fbjk->fbik', pose_lin, pose_lin) / (norms.max(axis=-1)[..., None, None] ** 2)
    skew = np.abs(gram - np.eye(3) * gram[..., [0, 1, 2], [0, 1, 2]][..., None, :]).max(axis=(-1, -2))
    bad = (spread > UNIFORM_TOLERANCE) | (skew > UNIFORM_TOLERANCE)  # (n, bones)
    if not bad.any():
        return
    pos = {n: i for i, n in enumerate(needed)}
    bones = obj.data.bones
    for names in chain_bones:
        hit = [n for n in names if bad[:, pos[n]].any()]
        if not hit:
            continue
        column = bad[:, pos[hit[0]]]
        k = int(np.argmax(column))
        lineage = [a.name for a in reversed(bones[hit[0]].parent_recursive)] + [hit[0]]
        cause = next(n for n in lineage if bad[k, pos[n]])
        raise InvalidChainError(
            f"bone {hit[0]} is scaled unevenly at frame {int(frames[k])}"
            + (f" (by its parent {cause})" if cause != hit[0] else "")
            + f": rotation keys cannot give the simulated directions exactly; give {cause} the same scale on "
            "all three axes (the object itself may be scaled unevenly)")


def settings_for(obj, scene, chains):
    fps = scene.render.fps / scene.render.fps_base
    return [c.chain_settings(fps, scene.unit_settings.scale_length) for c in chains]

"""Making the bake's key sets: offsets and animated channel values -> keys per bone (second stage).

No Blender calls here: takes arrays, returns a :class:`KeySet` (plain numpy arrays per bone) that
``bake_layer`` writes. How a channel is written (see ``bake_layer`` for why):

- ``ABSOLUTE`` (the channel nothing animates, or ``into_action``): ``basis ∘ offset``, Euler
  angles chosen nearest the previous frame's.
- ``LAYERED`` quaternion: the offset as it is, or conjugated by the active action's own rotation
  ``U`` when the action animates the channel (``U ∘ offset ∘ U⁻¹``): COMBINE puts the layer
  *under* the action (``layer ∘ U``), so ``U ∘ offset ∘ U⁻¹ ∘ U = U ∘ offset``.
- ``LAYERED`` Euler: ``euler(animated ∘ offset) - euler(animated)`` (COMBINE adds Euler angles).

Keys: at tolerance 0 a key on every frame with Blender's automatic handles; above 0 the reduced
Bézier keys with ALIGNED handles as computed by ``core.key_reduce``.
"""
from dataclasses import dataclass

import numpy as np

from ..core.key_reduce import reduce_euler_groups, reduce_quaternion_groups
from ..core.rotations import compose_euler, quat_multiply

ABSOLUTE = "ABSOLUTE"
LAYERED = "LAYERED"
_IDENTITY = np.array([1.0, 0.0, 0.0, 0.0])


@dataclass(frozen=True, slots=True)
class BoneKeys:
    """Keys for one bone's rotation channel, components first; handles None = Blender's automatic."""

    co: np.ndarray            # (c, n, 2) float32 (frame, value)
    handle_left: object       # (c, n, 2) float32 or None
    handle_right: object

    @property
    def n_keys(self):
        return int(self.co.shape[0] * self.co.shape[1])


@dataclass(frozen=True, slots=True)
class KeySet:
    """Everything one bake writes, per bone in the order given."""

    keys_by_bone: dict
    """{bone: BoneKeys}"""
    keys_before: int
    """Keys a per-frame bake would write (channels x frames)."""
    max_error_rad: float
    """Largest difference between the keys (Blender's Bézier rule) and the per-frame values."""

    @property
    def keys_written(self) -> int:
        return sum(k.n_keys for k in self.keys_by_bone.values())


@dataclass(frozen=True, slots=True)
class ChannelJob:
    """How one bone's rotation channel is made (input of :func:`channel_values`)."""

    mode: str                 # the bone's rotation mode: 'QUATERNION' or an Euler order
    how: str                  # ABSOLUTE or LAYERED
    basis: object             # (n, c) animated (or static, tiled) values; for a LAYERED quaternion the
                              # active action's own rotation, or None when the action does not animate it


def continuous(q, reference):
    """q (..., n, 4) with signs flipped so q[..., 0, :]·reference >= 0 and consecutive rows share a
    hemisphere; reference (..., 4)."""
    q = np.asarray(q)
    first = np.where(np.sum(q[..., 0, :] * reference, axis=-1) < 0.0, -1.0, 1.0)  # (...)
    flips = np.sum(q[..., 1:, :] * q[..., :-1, :], axis=-1) < 0.0
    odd = np.concatenate((np.zeros(flips.shape[:-1] + (1,), dtype=np.int64), np.cumsum(flips, axis=-1)), axis=-1) % 2
    return q * (first[..., None] * np.where(odd == 1, -1.0, 1.0))[..., None]


def channel_values(offsets, jobs):
    """{bone: (n, c) channel values to key} from {bone: (n, 4) unit offsets} and {bone: ChannelJob}."""
    values, euler_jobs = {}, {}
    plain_quats = [n for n, j in jobs.items() if j.mode == 'QUATERNION' and j.how == LAYERED and j.basis is None]
    if plain_quats:   # offsets as they are on the COMBINE layer, hemisphere-continuous from identity
        stacked = continuous(np.stack([offsets[n] for n in plain_quats]), _IDENTITY)
        values.update(zip(plain_quats, stacked))
    for name, job in jobs.items():
        if name in values:
            continue
        q_off = offsets[name]
        if job.mode == 'QUATERNION' and job.how == LAYERED:
            u = job.basis / np.linalg.norm(job.basis, axis=1, keepdims=True)
            u_inv = u * np.array([1.0, -1.0, -1.0, -1.0])
            values[name] = continuous(quat_multiply(quat_multiply(u, q_off), u_inv), _IDENTITY)
        elif job.mode == 'QUATERNION':
            values[name] = continuous(quat_multiply(job.basis, q_off), job.basis[0])
        else:
            euler_jobs.setdefault(job.mode, []).append(name)
    for order, names in euler_jobs.items():   # one batched composition per Euler order
        bases = np.stack([jobs[n].basis for n in names])
        composed = compose_euler(bases, order, np.stack([offsets[n] for n in names]))
        for b, name in enumerate(names):
            values[name] = composed[b] if jobs[name].how == ABSOLUTE else composed[b] - bases[b]
    return {n: values[n] for n in jobs}


def _reduce_all(frames, values_by_bone, quaternion_bones, tol_rad):
    """Reduce every bone's channel values at once (one batched call per rotation kind)."""
    out, max_err = {}, 0.0
    quat_names = [n for n in values_by_bone if n in quaternion_bones]
    euler_names = [n for n in values_by_bone if n not in quaternion_bones]
    for names, reduce in ((quat_names, reduce_quaternion_groups), (euler_names, reduce_euler_groups)):
        if names:
            curves, errors = reduce(frames, np.stack([values_by_bone[n] for n in names]), tol_rad, with_errors=True)
            out.update(zip(names, curves))
            max_err = max(max_err, float(np.max(errors)))
    return {n: out[n] for n in values_by_bone}, max_err


def _keys_from_curves(curves):
    """BoneKeys of reduced curves sharing their key frames (ALIGNED handles as written)."""
    co = np.empty((len(curves), curves[0].n_keys_after, 2), dtype=np.float32)
    co[:, :, 0] = curves[0].key_frames
    co[:, :, 1] = [c.key_values for c in curves]
    return BoneKeys(co, np.array([c.handle_left for c in curves], dtype=np.float32),
                    np.array([c.handle_right for c in curves], dtype=np.float32))


def _keys_every_frame(frames, values_by_bone):
    """{bone: BoneKeys} with a key on every frame and Blender's automatic handles; bones with the
    same number of components share one array."""
    out = {}
    for n_components in {v.shape[1] for v in values_by_bone.values()}:
        names = [n for n, v in values_by_bone.items() if v.shape[1] == n_components]
        co = np.empty((len(names), n_components, len(frames), 2), dtype=np.float32)
        co[:, :, :, 0] = frames
        co[:, :, :, 1] = np.stack([values_by_bone[n] for n in names]).transpose(0, 2, 1)
        out.update((n, BoneKeys(co[b], None, None)) for b, n in enumerate(names))
    return {n: out[n] for n in values_by_bone}


def make_key_set(frames, values_by_bone, quaternion_bones, tol_rad, tol_by_bone=None) -> KeySet:
    """Keys for every bone: per frame at tolerance 0, else reduced within the tolerance.

    ``tol_by_bone`` ({bone: radians}) overrides ``tol_rad`` for the bones it names (chains whose
    errors add up through constraints bake tighter); bones sharing a tolerance are reduced together.
    """
    tol = {n: (tol_by_bone or {}).get(n, tol_rad) for n in values_by_bone}
    keys_before = sum(v.shape[1] for v in values_by_bone.values()) * len(frames)
    keys, max_err = {}, 0.0
    for t in sorted(set(tol.values())):
        group = {n: v for n, v in values_by_bone.items() if tol[n] == t}
        if t == 0.0:
            keys.update(_keys_every_frame(frames, group))
            continue
        per_bone, err = _reduce_all(frames, group, quaternion_bones, t)
        keys.update((n, _keys_from_curves(c)) for n, c in per_bone.items())
        max_err = max(max_err, err)
    return KeySet({n: keys[n] for n in values_by_bone}, keys_before, max_err)

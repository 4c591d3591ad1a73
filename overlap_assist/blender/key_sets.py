"""Making the bake's key sets: offsets and animated channel values -> keys per bone (second stage).

No Blender calls here: takes arrays, returns a :class:`KeySet` (plain numpy arrays per bone) that
``bake_layer`` writes. How a channel is written (see ``bake_layer`` for why):

- ``ABSOLUTE`` (the channel nothing animates, or ``into_action``): ``basis ∘ offset``, Euler
  angles chosen nearest the previous frame's.
- ``LAYERED`` quaternion: the offset as it is, or conjugated by the active action's own rotation
  ``U`` when the action animates the channel (``U ∘ offset ∘ U⁻¹``): COMBINE puts the layer
  *under* the action (``layer ∘ U``), so ``U ∘ offset ∘ U⁻¹ ∘ U = U ∘ offset``.
- ``LAYERED`` Euler: ``euler(animated ∘ offset) - euler(animated)`` (COMBINE adds Euler angles).

Keys: at tolerance 0 a key on every frame with Blender's automatic handles; above 0 the keys of
``core.key_reduce.reduce_rotation_keys``: each component keyed where it needs keys, fitted handles
(ALIGNED where both sides share a slope, FREE elsewhere), no curve for a component that stays at
the value it has without one, the rotation angle bounded at every frame.
"""
from dataclasses import dataclass

import numpy as np

from ..core.key_reduce import RotationTrack, reduce_rotation_keys
from ..core.rotations import compose_euler, quat_multiply

ABSOLUTE = "ABSOLUTE"
LAYERED = "LAYERED"
_IDENTITY = np.array([1.0, 0.0, 0.0, 0.0])


@dataclass(frozen=True, slots=True)
class BoneKeys:
    """Keys for one bone's rotation channel, one entry per component (None: no curve is written);
    handles None = Blender's automatic; handle_types: per component, per-key type names or bools
    (True: ALIGNED, False: FREE), or None (AUTO_CLAMPED)."""

    co: object                # sequence of (n_i, 2) float32 (frame, value) or None
    handle_left: object       # sequence of (n_i, 2) float32, or None for automatic handles
    handle_right: object
    handle_types: object = None

    @property
    def n_keys(self):
        return int(sum(c.shape[0] for c in self.co if c is not None))


@dataclass(frozen=True, slots=True)
class KeySet:
    """Everything one bake writes, per bone in the order given."""

    keys_by_bone: dict
    """{bone: BoneKeys}"""
    keys_before: int
    """Keys a per-frame bake would write (channels x frames)."""
    max_error_rad: float
    """Largest rotation angle between the orientation the keys give (float32 curves, Blender's
    Bézier rule) and the per-frame one, at any frame; 0 with a key on every frame."""

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
    conjugated = [n for n, j in jobs.items() if n not in values and j.mode == 'QUATERNION' and j.how == LAYERED]
    if conjugated:   # U ∘ offset ∘ U⁻¹ of all such bones in one batch
        u = np.stack([jobs[n].basis for n in conjugated])
        u = u / np.linalg.norm(u, axis=2, keepdims=True)
        u_inv = u * np.array([1.0, -1.0, -1.0, -1.0])
        stacked = np.stack([offsets[n] for n in conjugated])
        values.update(zip(conjugated, continuous(quat_multiply(quat_multiply(u, stacked), u_inv), _IDENTITY)))
    absolute = [n for n, j in jobs.items() if n not in values and j.mode == 'QUATERNION']
    if absolute:
        basis = np.stack([jobs[n].basis for n in absolute])
        composed = quat_multiply(basis, np.stack([offsets[n] for n in absolute]))
        values.update(zip(absolute, continuous(composed, basis[:, 0])))
    for name, job in jobs.items():
        if name not in values:
            euler_jobs.setdefault(job.mode, []).append(name)
    for order, names in euler_jobs.items():   # one batched composition per Euler order
        bases = np.stack([jobs[n].basis for n in names])
        composed = compose_euler(bases, order, np.stack([offsets[n] for n in names]))
        for b, name in enumerate(names):
            values[name] = composed[b] if jobs[name].how == ABSOLUTE else composed[b] - bases[b]
    return {n: values[n] for n in jobs}


def rotation_tracks(values_by_bone, jobs, into_action):
    """{bone: RotationTrack} for the reducer: what each written channel must evaluate to, the
    Euler angles a COMBINE layer adds to, and the value a component without a curve has.

    - LAYERED quaternion: COMBINE with no curve is the identity (no offset).
    - LAYERED Euler: the curves add to the animated angles (``basis``); no curve adds 0.
    - ABSOLUTE on the layer: a component without a curve keeps its static value.
    - ``into_action``: every component keeps a curve (the action's channel is replaced).
    """
    tracks = {}
    for name, values in values_by_bone.items():
        job = jobs[name]
        basis, rest = None, None
        if job.how == LAYERED:
            if job.mode == 'QUATERNION':
                rest = _IDENTITY
            else:
                basis, rest = job.basis, np.zeros(3)
        elif not into_action:
            rest = np.asarray(job.basis[0], dtype=np.float64)   # the static value, tiled
        tracks[name] = RotationTrack(values, job.mode, basis, rest)
    return tracks


def _reduce_all(frames, tracks, tol_rad, shared_frames=False):
    """{bone: BoneKeys} within ``tol_rad`` of rotation angle at every frame, and the largest
    measured angle (rad): one call of the core reducer for all bones ({bone: RotationTrack})."""
    names = list(tracks)
    reduced = reduce_rotation_keys(frames, [tracks[n] for n in names], tol_rad, shared_frames=shared_frames)
    out = {}
    for name, keys in zip(names, reduced):
        co, lefts, rights, types = [], [], [], []
        for ch in keys.channels:
            if ch is None:   # the component needs no curve
                co.append(None)
                lefts.append(None)
                rights.append(None)
                types.append(None)
                continue
            pair = np.empty((ch.n_keys, 2), dtype=np.float32)
            pair[:, 0], pair[:, 1] = ch.frames, ch.values
            co.append(pair)
            lefts.append(np.ascontiguousarray(ch.handle_left, dtype=np.float32))
            rights.append(np.ascontiguousarray(ch.handle_right, dtype=np.float32))
            types.append(ch.aligned)   # bool per key: ALIGNED, else FREE
        out[name] = BoneKeys(co, lefts, rights, types)
    return out, max((k.max_error_rad for k in reduced), default=0.0)


def _keys_every_frame(frames, values_by_bone):
    """{bone: BoneKeys} with a key on every frame and Blender's automatic handles; bones with the
    same number of components share one array."""
    out = {}
    for n_components in {v.shape[1] for v in values_by_bone.values()}:
        names = [n for n, v in values_by_bone.items() if v.shape[1] == n_components]
        co = np.empty((len(names), n_components, len(frames), 2), dtype=np.float32)
        co[:, :, :, 0] = frames
        co[:, :, :, 1] = np.stack([values_by_bone[n] for n in names]).transpose(0, 2, 1)
        out.update((n, BoneKeys(list(co[b]), None, None)) for b, n in enumerate(names))
    return {n: out[n] for n in values_by_bone}


def make_key_set(frames, tracks, tol_rad, tol_by_bone=None, shared_frames=False) -> KeySet:
    """Keys for every bone ({bone: RotationTrack}, see :func:`rotation_tracks`): per frame at
    tolerance 0, else reduced within the tolerance (rotation angle).

    ``tol_by_bone`` ({bone: radians}) overrides ``tol_rad`` for the bones it names (chains whose
    errors add up through constraints bake tighter); bones sharing a tolerance are reduced together.
    ``shared_frames``: key all components of a bone on the same frames (more keys; default False:
    each component gets only the keys it needs).
    """
    values_by_bone = {n: t.values for n, t in tracks.items()}
    tol = {n: (tol_by_bone or {}).get(n, tol_rad) for n in tracks}
    keys_before = sum(v.shape[1] for v in values_by_bone.values()) * len(frames)
    keys, max_err = {}, 0.0
    for t in sorted(set(tol.values())):
        if t == 0.0:
            keys.update(_keys_every_frame(frames, {n: v for n, v in values_by_bone.items() if tol[n] == t}))
            continue
        group, err = _reduce_all(frames, {n: tr for n, tr in tracks.items() if tol[n] == t}, t, shared_frames)
        keys.update(group)
        max_err = max(max_err, err)
    return KeySet({n: keys[n] for n in tracks}, keys_before, max_err)

"""Live preview: poses chain bones from a cached solve while scrubbing or playing, without keys.

One owner object (``PREVIEW``) holds the cache per armature and the on/off state; it is runtime
state, never saved. A frame-change handler is installed only while some preview is on and is
removed on unregister and when a file is loaded. Chain-setting edits re-solve from the cached
samples (fast); edits to the animation (an Action datablock updated) re-sample the rig.
Turning the preview off puts back the animated pose exactly.
"""
import time

import bpy
import numpy as np

from ..core.rotations import quat_multiply
from . import app_handlers, frame_guard
from .frame_ranges import chain_range


class PreviewCache:
    """Cached samples and solved offsets of one armature."""

    def __init__(self):
        self.sampled = None           # chain_sim.SampledRig
        self.offsets = None           # per chain (n, n_links, 4)
        self.posed = None             # per chain (n, n_links, 4): animated basis ∘ offset, as lists per frame
        self.motion = None
        self.solve_dirty = True
        self.sample_dirty = True
        self.saved_rotations = {}     # bone -> (mode, values) before the preview touched it


class PreviewOwner:
    def __init__(self):
        self.caches = {}              # object name -> PreviewCache
        self.last_cost_s = 0.0

    # -- state
    def is_on(self, obj):
        return obj is not None and obj.name in self.caches

    def start(self, obj):
        if obj.name in self.caches:
            return self.caches[obj.name]
        cache = self.caches.setdefault(obj.name, PreviewCache())
        cache.saved_rotations = {b: _read_rotation(obj.pose.bones[b])
                                 for c in obj.overlap_assist.chains for b in c.bone_names() if b in obj.pose.bones}
        _install()
        return cache

    def stop(self, obj, scene=None):
        cache = self.caches.pop(obj.name, None)
        if cache is None:
            return
        for bone, saved in cache.saved_rotations.items():
            if bone in obj.pose.bones:
                _write_rotation(obj.pose.bones[bone], *saved)
        if not self.caches:
            _uninstall()
        if scene is not None:
            with self.suspended():
                scene.frame_set(scene.frame_current, subframe=scene.frame_subframe)

    def stop_all(self):
        for name in list(self.caches):
            obj = bpy.data.objects.get(name)
            if obj is not None:
                self.stop(obj)
        self.caches.clear()
        _uninstall()

    @staticmethod
    def suspended():
        """Frame changes inside do not pose bones (see frame_guard)."""
        return frame_guard.held()

    def mark_dirty(self, settings_only=False):
        for cache in self.caches.values():
            cache.solve_dirty = True
            if not settings_only:
                cache.sample_dirty = True

    # -- work
    def ensure_solved(self, obj, scene):
        from . import chain_sim
        cache = self.caches[obj.name]
        chains = chain_sim.active_chains(obj)
        start, end = chain_range(obj, scene)
        stale = (cache.sampled is None or cache.sampled.chain_names != [c.name for c in chains]
                 or (cache.sampled.frames[0], cache.sampled.frames[-1]) != (start, end))
        if cache.sample_dirty or stale:
            cache.sampled = chain_sim.sample_rig(obj, scene, chains, start, end)
            cache.sample_dirty, cache.solve_dirty = False, True
        if cache.solve_dirty:
            cache.motion, cache.offsets = chain_sim.solve(cache.sampled, chain_sim.settings_for(obj, scene, chains))
            # Compose once per solve, so a frame change only copies numbers onto bones.
            posed = np.concatenate([quat_multiply(b, o) for b, o in zip(cache.sampled.basis_rot, cache.offsets)],
                                   axis=1)
            cache.posed = posed.tolist()
            cache.solve_dirty = False
        return cache

    def apply(self, obj, scene):
        cache = self.caches.get(obj.name)
        if cache is None or cache.sampled is None or cache.posed is None:
            return
        k = int(round(scene.frame_current - cache.sampled.frames[0]))
        if not 0 <= k < len(cache.posed):
            return
        pbones = obj.pose.bones
        names = [n for chain in cache.sampled.bone_names for n in chain]
        for name, q in zip(names, cache.posed[k]):
            pb = pbones[name]
            if pb.rotation_mode == 'QUATERNION':
                pb.rotation_quaternion = q
            else:
                _write_quaternion(pb, q)


PREVIEW = PreviewOwner()


def mark_dirty(settings_only=False):
    PREVIEW.mark_dirty(settings_only)


def suspended():
    return PREVIEW.suspended()


def _read_rotation(pb):
    mode = pb.rotation_mode
    if mode == 'QUATERNION':
        return mode, tuple(pb.rotation_quaternion)
    if mode == 'AXIS_ANGLE':
        return mode, tuple(pb.rotation_axis_angle)
    return mode, tuple(pb.rotation_euler)


def _write_rotation(pb, mode, values):
    if mode == 'QUATERNION':
        pb.rotation_quaternion = values
    elif mode == 'AXIS_ANGLE':
        pb.rotation_axis_angle = values
    else:
        pb.rotation_euler = values


def _write_quaternion(pb, q):
    """Set a pose bone's rotation from a quaternion (w, x, y, z) in whatever mode it uses."""
    from mathutils import Quaternion
    mode = pb.rotation_mode
    if mode == 'QUATERNION':
        pb.rotation_quaternion = q
    elif mode == 'AXIS_ANGLE':
        axis, angle = Quaternion(q).to_axis_angle()
        pb.rotation_axis_angle = (angle, *axis)
    else:
        pb.rotation_euler = Quaternion(q).to_euler(mode, pb.rotation_euler)


@bpy.app.handlers.persistent
def _on_frame_change(scene, depsgraph=None):
    if frame_guard.is_held():
        return
    start = time.perf_counter()
    with PREVIEW.suspended():
        for name in list(PREVIEW.caches):
            obj = scene.objects.get(name)
            if obj is None:
                continue
            try:
                PREVIEW.ensure_solved(obj, scene)
            except Exception as exc:  # noqa: BLE001 - a handler must never raise into playback
                print(f"Overlap Assist preview stopped for {name}: {exc}")
                PREVIEW.stop(obj)
                continue
            PREVIEW.apply(obj, scene)
    PREVIEW.last_cost_s = time.perf_counter() - start


@bpy.app.handlers.persistent
def _on_depsgraph_update(scene, depsgraph):
    if frame_guard.is_held() or not PREVIEW.caches:
        return
    for update in depsgraph.updates:
        if isinstance(update.id, bpy.types.Action):
            PREVIEW.mark_dirty()
            return


@bpy.app.handlers.persistent
def _on_load_pre(*_args):
    PREVIEW.caches.clear()
    _uninstall()


@bpy.app.handlers.persistent
def _on_save_pre(*_args):
    # Un-animated chain bones hold preview values: put the animated pose back before saving.
    for name, cache in PREVIEW.caches.items():
        obj = bpy.data.objects.get(name)
        if obj is not None:
            for bone, saved in cache.saved_rotations.items():
                if bone in obj.pose.bones:
                    _write_rotation(obj.pose.bones[bone], *saved)


@bpy.app.handlers.persistent
def _on_save_post(*_args):
    for name in PREVIEW.caches:
        obj = bpy.data.objects.get(name)
        if obj is not None:
            for scene in obj.users_scene:
                PREVIEW.apply(obj, scene)


_HANDLERS = (
    ("frame_change_post", _on_frame_change),
    ("depsgraph_update_post", _on_depsgraph_update),
    ("save_pre", _on_save_pre),
    ("save_post", _on_save_post),
)


def _install():
    app_handlers.add(_HANDLERS)


def _uninstall():
    app_handlers.remove(_HANDLERS)


def register():
    bpy.app.handlers.load_pre.append(_on_load_pre)


def unregister():
    PREVIEW.stop_all()
    _uninstall()
    while _on_load_pre in bpy.app.handlers.load_pre:
        bpy.app.handlers.load_pre.remove(_on_load_pre)

"""Operators for the bake layer: remove it, and the confirmation "Write into the action" needs."""
import time

import bpy

from ..core import readout
from ..core.errors import OverlapAssistError
from . import bake, bake_layer
from .selection import armature_poll, bone_selected
from .op_errors import guarded
from .frame_ranges import chain_range

INTO_ACTION_WARNING = ("This replaces the rotation keys of the baked bones in your action over the baked "
                       "frames. Undo (Ctrl+Z) brings them back")


def confirm_into_action(operator, context, event):
    """``invoke`` helper for a bake operator with an ``into_action`` option: confirm first.

    Returns the operator's ``execute`` result directly when ``into_action`` is off.
    """
    if not getattr(operator.properties, "into_action", False):
        return operator.execute(context)
    return context.window_manager.invoke_confirm(
        operator, event, title="Write into the action?", message=INTO_ACTION_WARNING,
        confirm_text="Write Keys", icon='WARNING')


@guarded
class OVERLAP_ASSIST_OT_remove_bake(bpy.types.Operator):
    """Delete the Overlap Bake layer and its action; the animation plays exactly as before the bake"""
    bl_idname = "overlap_assist.remove_bake"
    bl_label = "Remove Bake"
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        obj = context.active_object
        if not bake_layer.has_bake(obj):
            cls.poll_message_set(f"{obj.name} has no {bake_layer.BAKE_TRACK_NAME} layer to remove")
            return False
        ad = obj.animation_data
        if ad.use_tweak_mode:
            cls.poll_message_set("Leave NLA tweak mode first (Tab in the NLA editor)")
            return False
        return True

    def execute(self, context):
        obj = context.active_object
        try:
            removed = bake_layer.remove_bake(obj)
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        if not removed:
            self.report({'WARNING'}, f"{obj.name} has no {bake_layer.BAKE_TRACK_NAME} layer")
            return {'CANCELLED'}
        self.report({'INFO'}, f"Removed the {bake_layer.BAKE_TRACK_NAME} layer of {obj.name}")
        return {'FINISHED'}


def offsets_by_bone(sampled, offsets):
    """{bone name: (n_frames, 4) offset quaternion} from the solver's per-chain arrays."""
    out = {}
    for names, offs in zip(sampled.bone_names, offsets):
        for j, name in enumerate(names):
            out[name] = offs[:, j]
    return out


def chain_drives(obj, chains):
    """Per chain, [rig_drive.Drive]: which bones the keys go on; refuses what cannot be keyed."""
    from . import chain_check, rig_drive
    chain_check.check_chains(obj, chains)
    drives = [rig_drive.resolve_chain(obj, c.bone_names()) for c in chains]
    problem = chain_check.shared_problem([(c.name, [d.key_bone for d in ds]) for c, ds in zip(chains, drives)])
    problem = problem or chain_check.lock_problem(obj, [d.key_bone for ds in drives for d in ds])
    if problem:
        raise bake_layer.BakeError(problem)
    return drives


def bake_steps(obj, scene, chains, frame_start, frame_end, tolerance_deg, into_action=False, shared_frames=False):
    """The bake as a generator: yields the fraction done, returns (BakeStats, SampledRig, ChainMotion).

    ``shared_frames``: key all rotation channels of a bone on the same frames (see ``bake.bake_offsets``).

    Stages: which bones take the keys (``rig_drive``), sampling the animated rig (the long part;
    closing the generator there, a cancelled bake, leaves the scene as it was), the solver, the
    key bones' rotations where constraints sit in between (``control_solve``, by evaluating the
    rig), and the bake (``bake``).
    """
    from . import chain_sim, control_solve, rig_drive
    drives = chain_drives(obj, chains)
    solved = [i for i, ds in enumerate(drives) if rig_drive.needs_solving(ds)]
    share = 0.45 if solved else 0.8
    sampling = chain_sim.sample_rig_steps(obj, scene, chains, frame_start, frame_end)
    try:
        while True:
            yield share * next(sampling)
    except StopIteration as done:
        sampled = done.value
    motion, offsets = chain_sim.solve(sampled, chain_sim.settings_for(obj, scene, chains))
    by_bone = offsets_by_bone(sampled, offsets)
    for i in solved:
        for name in sampled.bone_names[i]:
            del by_bone[name]
    if solved:
        steps = control_solve.solve_steps(obj, scene, sampled.frames, [drives[i] for i in solved],
                                          [motion.dirs[i] for i in solved])
        try:
            while True:
                yield share + (0.8 - share) * next(steps)
        except StopIteration as done:
            by_bone.update(done.value[0])
    yield 0.85
    # Through constraints a key bone's error reaches every bone after it (Copy Rotation chains
    # count it again per link): those chains bake at the tolerance shared out over their links.
    tighter = {d.key_bone: tolerance_deg / len(drives[i]) for i in solved for d in drives[i]}
    stats = bake.bake_offsets(obj, sampled.frames.astype(int), by_bone,
                              tolerance_deg=tolerance_deg, into_action=into_action,
                              influence=obj.overlap_assist.bake_influence, scene=scene,
                              tolerance_by_bone_deg=tighter, shared_frames=shared_frames)
    return stats, sampled, motion


def bake_chains(obj, scene, chains, frame_start, frame_end, tolerance_deg, into_action=False, progress=None,
                shared_frames=False):
    """Sample, solve and bake ``chains``; returns (BakeStats, SampledRig, ChainMotion)."""
    from .chain_sim import run_to_end
    return run_to_end(bake_steps(obj, scene, chains, frame_start, frame_end, tolerance_deg, into_action,
                                 shared_frames), progress)


@guarded
class OVERLAP_ASSIST_OT_bake_chains(bpy.types.Operator):
    """Simulate the chains and bake them to editable keys on the Overlap Bake layer (the animation itself is kept)"""
    bl_idname = "overlap_assist.bake_chains"
    bl_label = "Bake Chains"
    bl_options = {'REGISTER', 'UNDO'}

    into_action: bpy.props.BoolProperty(
        name="Write into the action", default=False,
        description="Write the result into your action instead of a separate layer (asks first)")

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        obj = context.active_object
        if not len(obj.overlap_assist.chains):
            cls.poll_message_set("Add chains first (Chains panel)")
            return False
        return True

    def _job(self, context):
        """(obj, scene, chains, start, end) to bake; raises OverlapAssistError with what to do."""
        from . import chain_sim
        obj, scene = context.active_object, context.scene
        s = obj.overlap_assist
        names = None
        if s.bake_scope == "SELECTED":
            from . import rig_drive   # a chain counts as selected by its own bones or the controls it keys
            names = {c.name for c in s.chains
                     if any(bone_selected(obj, b) for b in c.bone_names() + rig_drive.key_bones(obj, c.bone_names()))}
            if not names:
                raise OverlapAssistError("no chain has a selected bone: select chain bones or bake all chains")
        chains = chain_sim.active_chains(obj, names)
        start, end = chain_range(obj, scene)
        return obj, scene, chains, start, end

    def _finished(self, obj, n_chains, stats):
        bpy.context.view_layer.update()   # the baked pose now, also for scripts (no redraw there)
        obj.overlap_assist.last_bake = f"{readout.count(n_chains, 'chain')}: {stats.summary()}"
        self.report({'INFO'}, f"{readout.count(n_chains, 'chain')}, " + stats.summary())
        return {'FINISHED'}

    def invoke(self, context, event):
        if self.into_action or bpy.app.background:
            return confirm_into_action(self, context, event)
        # In the UI a bake runs a step at a time from a timer: progress shows and Esc cancels.
        try:
            obj, scene, chains, start, end = self._job(context)
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        self._obj, self._n = obj, len(chains)
        settings = obj.overlap_assist
        self._steps = bake_steps(obj, scene, chains, start, end, settings.bake_tolerance_deg,
                                 shared_frames=settings.bake_shared_frames)
        wm = context.window_manager
        wm.progress_begin(0, 100)
        self._timer = wm.event_timer_add(0.01, window=context.window)
        wm.modal_handler_add(self)
        return {'RUNNING_MODAL'}

    def _stop(self, context):
        wm = context.window_manager
        wm.event_timer_remove(self._timer)
        wm.progress_end()
        context.workspace.status_text_set(None)

    def modal(self, context, event):
        if event.type in {'ESC', 'RIGHTMOUSE'}:
            self._steps.close()  # sampling restores the frame and the layer; nothing was written
            self._stop(context)
            self.report({'WARNING'}, "Bake cancelled: nothing changed")
            return {'CANCELLED'}
        if event.type != 'TIMER':
            return {'RUNNING_MODAL'}
        deadline = time.perf_counter() + 0.1
        try:
            while time.perf_counter() < deadline:
                fraction = next(self._steps)
                context.window_manager.progress_update(int(100 * fraction))
                context.workspace.status_text_set(f"Baking chains: {100 * fraction:.0f} % (Esc to cancel)")
        except StopIteration as done:
            self._stop(context)
            return self._finished(self._obj, self._n, done.value[0])
        except OverlapAssistError as exc:
            self._stop(context)
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        return {'RUNNING_MODAL'}

    def execute(self, context):
        wm = context.window_manager
        wm.progress_begin(0, 100)
        try:
            obj, scene, chains, start, end = self._job(context)
            settings = obj.overlap_assist
            stats, _, _ = bake_chains(obj, scene, chains, start, end, settings.bake_tolerance_deg,
                                      into_action=self.into_action,
                                      progress=lambda f: wm.progress_update(int(100 * f)),
                                      shared_frames=settings.bake_shared_frames)
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        finally:
            wm.progress_end()
        return self._finished(obj, len(chains), stats)


classes = (OVERLAP_ASSIST_OT_remove_bake, OVERLAP_ASSIST_OT_bake_chains)

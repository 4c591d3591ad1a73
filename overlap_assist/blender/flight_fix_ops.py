"""Operators: Check Spin, Fix Flight, Remove Flight Fix (thin: settings -> flight_jobs -> report).

Fix Flight's choices (what to keep, the blend) live on the armature (``body.fix_mode``,
``body.fix_blend_frames``) so they are saved with the file; the operator's own properties, when
a caller sets them, win (``flight_jobs.apply_fix`` stores the choices a fix was made with). The layer's influence is its strip's own value,
edited through ``body.fix_influence``.
"""
import bpy
from bpy.props import EnumProperty, FloatProperty

from ..core.flight_fix import BLEND_FRAMES
from . import flight_fix_layer, flight_jobs
from .op_errors import guarded
from .op_progress import progress_bar, report_warnings
from .properties import FIX_MODES
from .selection import OnArmature, armature_poll


@guarded
class OVERLAP_ASSIST_OT_check_spin(OnArmature, bpy.types.Operator):
    """Measure the whole body's angular momentum in each flight and report spin that starts or stops with nothing to push against"""
    bl_idname = "overlap_assist.check_spin"
    bl_label = "Check Spin"

    def execute(self, context):
        obj, scene = context.active_object, context.scene
        with progress_bar(context) as progress:   # a domain error becomes its one line through @guarded
            _result, checks, warnings = flight_jobs.run_spin_check(obj, scene, progress)
        flight_jobs.store_spin_summary(obj, checks)
        report_warnings(self, warnings)
        found = [c for c in checks if c.finding]
        self.report({'WARNING'} if found else {'INFO'}, flight_jobs.spin_summary_line(checks))
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_fix_flight(OnArmature, bpy.types.Operator):
    """Put the body's center of mass on the exact ballistic arc in every flight, on its own removable NLA layer (the animation itself is not changed)"""
    bl_idname = "overlap_assist.fix_flight"
    bl_label = "Fix Flight"

    mode: EnumProperty(name="Keep", items=FIX_MODES, default="KEEP_CONTACTS",
                       description="What the corrected arc keeps from the animation (default: the armature's setting)")
    blend_frames: FloatProperty(name="Blend (frames)", default=BLEND_FRAMES, min=0.0, max=12.0,
                                description="Frames over which the correction fades in before takeoff and out "
                                            "after touchdown (default: the armature's setting)")
    influence: FloatProperty(name="Influence", default=1.0, min=0.0, max=1.0, subtype='FACTOR',
                             description="How much of the correction is mixed over the animation")

    def execute(self, context):
        obj, scene = context.active_object, context.scene
        body = obj.overlap_assist.body
        mode = self.mode if self.properties.is_property_set("mode") else body.fix_mode
        blend = self.blend_frames if self.properties.is_property_set("blend_frames") else body.fix_blend_frames
        with progress_bar(context) as progress:
            stats, fix, result, warnings = flight_jobs.apply_fix(obj, scene, mode, blend, self.influence, progress)
        context.view_layer.update()
        report_warnings(self, warnings)
        advice = "; ".join(c.advice(result.fps) for c in fix.flights)
        self.report({'INFO'}, f"{stats.summary()}: {advice}")
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_remove_flight_fix(bpy.types.Operator):
    """Delete the flight-fix layer and restore the animation exactly as it was"""
    bl_idname = "overlap_assist.remove_flight_fix"
    bl_label = "Remove Flight Fix"
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        if not flight_fix_layer.has_fix(context.active_object):
            cls.poll_message_set("This armature has no flight-fix layer")
            return False
        return True

    def execute(self, context):
        obj = context.active_object
        flight_fix_layer.remove_fix(obj)
        context.view_layer.update()
        self.report({'INFO'}, f"Removed the {flight_fix_layer.FIX_TRACK_NAME} layer from {obj.name}")
        return {'FINISHED'}


classes = (OVERLAP_ASSIST_OT_check_spin, OVERLAP_ASSIST_OT_fix_flight, OVERLAP_ASSIST_OT_remove_flight_fix)

"""Sidebar tab "Overlap": the Body Motion panel (settings, results, cautions)."""
import json

import bpy

from .analyze import CAUTION


class OverlapPanelMixin:
    bl_space_type = 'VIEW_3D'
    bl_region_type = 'UI'
    bl_category = "Overlap"

    @classmethod
    def poll(cls, context):
        obj = context.active_object
        return obj is not None and obj.type == 'ARMATURE'


def draw_flight(layout, fl, fps):
    col = layout.column(align=True)
    col.label(text=f"Takeoff {fl['takeoff_frame']:.1f} · apex {fl['apex_frame']:.1f} · "
                   f"touchdown {fl['touchdown_frame']:.1f}")
    col.label(text=f"Hang time {fl['hang_time_s']:.2f} s · apex {100 * fl['apex_height_m']:.0f} cm")
    col.label(text=f"Gravity: {fl['verdict']} ({fl['implied_gravity_mps2']:.2f} m/s²)",
              icon='CHECKMARK' if fl['verdict'].startswith("ballistic") else 'ERROR')
    if abs(fl["retime_frames"]) >= 0.5:
        col.label(text=f"Advice: {fl['retime_frames']:+.1f} frames of hang for this apex, "
                       f"or an apex of {100 * fl['apex_for_hang_time_m']:.0f} cm for this hang")
    if abs(fl.get("horizontal_accel_mps2", 0.0)) > 0.5:
        col.label(text=f"Horizontal speed changes in flight ({fl['horizontal_accel_mps2']:+.1f} m/s²)", icon='ERROR')
    if fl.get("arm_swing_offset_frames") is not None:
        off = fl["arm_swing_offset_frames"]
        if fl.get("late_arm_swing"):
            col.label(text=f"Arm swing peaks {off:.1f} frames after takeoff: body drops "
                           f"{100 * fl['arm_swing_body_drop_m']:.1f} cm", icon='ERROR')
        else:
            col.label(text=f"Arm swing peaks {-off:.1f} frames before takeoff")


class VIEW3D_PT_overlap_assist_body(OverlapPanelMixin, bpy.types.Panel):
    bl_label = "Body Motion"

    def draw(self, context):
        layout = self.layout
        layout.use_property_split = True
        layout.use_property_decorate = False
        obj = context.active_object
        s = obj.overlap_assist.body
        layout.prop(s, "body_source")
        if s.body_source == 'ROOT':
            layout.prop_search(s, "body_bone", obj.data, "bones")
        else:
            layout.prop(s, "segment_table")
            layout.prop(s, "bone_overrides")
        layout.prop(s, "gravity_source")
        layout.prop(s, "spline_blocked_keys")
        layout.operator("overlap_assist.analyze_motion", icon='PLAY')
        if not s.last_summary:
            return
        summary = json.loads(s.last_summary)
        box = layout.box()
        for fl in summary.get("flights", []):
            draw_flight(box, fl, summary.get("fps", 24.0))
        for land in summary.get("landings", []):
            box.label(text=f"Landing peak {land['peak_load_g']:.1f} g over {land['decel_frames']:.1f} frames")
        for w in summary.get("warnings", []):
            box.label(text=w, icon='INFO')
        box.label(text=CAUTION, icon='QUESTION')


class VIEW3D_PT_overlap_assist_body_options(OverlapPanelMixin, bpy.types.Panel):
    bl_label = "Sampling"
    bl_parent_id = "VIEW3D_PT_overlap_assist_body"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        layout = self.layout
        layout.use_property_split = True
        s = context.active_object.overlap_assist.body
        for prop in ("samples_per_frame", "smoothing_window", "smoothing_order", "flight_threshold",
                     "use_frame_range"):
            layout.prop(s, prop)
        if s.use_frame_range:
            row = layout.row(align=True)
            row.prop(s, "frame_start")
            row.prop(s, "frame_end")


classes = (VIEW3D_PT_overlap_assist_body, VIEW3D_PT_overlap_assist_body_options)

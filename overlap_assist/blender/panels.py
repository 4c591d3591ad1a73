"""Sidebar tab "Overlap": the Body Motion panel (settings, results, cautions)."""
import json

import bpy

from ..core import readout
from ..core.constants import CAUTION


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
    if fl.get("kind") == "drop":
        col.label(text=f"Drop {readout.frame(fl['takeoff_frame'])} · touchdown {readout.frame(fl['touchdown_frame'])}")
        col.label(text=f"In the air {fl['hang_time_s']:.2f} s (no takeoff speed: no apex or retiming check)")
        col.label(text=f"Gravity: {fl['verdict']} ({fl['implied_gravity_mps2']:.2f} m/s²)",
                  icon='CHECKMARK' if fl['verdict'].startswith("ballistic") else 'ERROR')
        return
    col.label(text=f"Takeoff {readout.frame(fl['takeoff_frame'])} · apex {readout.frame(fl['apex_frame'])} · "
                   f"touchdown {readout.frame(fl['touchdown_frame'])}")
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
        if s.body_source != 'COM':
            layout.prop_search(s, "body_bone", obj.data, "bones")
        if s.body_source != 'ROOT':
            layout.prop(s, "segment_table")
            layout.prop(s, "bone_overrides")
        layout.prop(s, "contact_bones")
        layout.prop(s, "gravity_source")
        layout.prop(s, "spline_blocked_keys")
        layout.operator("overlap_assist.analyze_motion", icon='PLAY')
        from .flight_panel import draw_flight_tools
        draw_flight_tools(layout, obj)
        if not s.last_summary:
            return
        summary = json.loads(s.last_summary)
        box = layout.box()
        used = {"com": "center of mass", "root": "root bone"}.get(summary.get("body_source"), "?")
        box.label(text=f"Body: {used}" + (" (automatic)" if s.body_source == 'AUTO' else ""))
        feet = summary.get("contact_feet") or []
        box.label(text="Airborne from: " + (f"feet ({', '.join(feet)})" if feet else "the body's path"))
        for fl in summary.get("flights", []):
            draw_flight(box, fl, summary.get("fps", 24.0))
        for land in summary.get("landings", []):
            box.label(text=f"Landing peak {readout.load_g(land['peak_load_g'])} over {land['decel_frames']:.1f} frames")
        for w in summary.get("warnings", []):
            box.label(text=readout.sentence(w), icon='INFO')
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


class OVERLAP_ASSIST_UL_chains(bpy.types.UIList):
    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index=0):
        from .chain_sim import chain_notes, chain_problem
        problem = chain_problem(context.active_object, item)
        row = layout.row(align=True)
        row.prop(item, "name", text="", emboss=False, icon='ERROR' if problem else 'BONE_DATA')
        row.label(text=readout.count(len(item.bones), "bone"))
        row.prop(item, "mute", text="", icon='HIDE_ON' if item.mute else 'HIDE_OFF', emboss=False)


class OVERLAP_ASSIST_UL_colliders(bpy.types.UIList):
    def draw_item(self, context, layout, data, item, icon, active_data, active_propname, index=0):
        row = layout.row(align=True)
        row.prop_search(item, "bone", context.active_object.data, "bones", text="")
        row.prop(item, "shape", text="")
        row.prop(item, "radius", text="")


def draw_chain_settings(layout, chain, fps):
    from ..core import response
    col = layout.column()
    col.prop(chain, "response_mode", expand=True)
    if chain.response_mode == "ANIMATOR":
        col.prop(chain, "bounce")
        col.prop(chain, "time_driver", expand=True)
        col.prop(chain, "settle_frames" if chain.time_driver == "SETTLE" else "lag_frames")
        try:
            f_hz, zeta = chain.physical(fps)
            derived = (f"Lag {response.lag_frames_of(f_hz, zeta, fps):.1f} frames"
                       if chain.time_driver == "SETTLE" else
                       f"Settle {response.settle_frames_of(f_hz, zeta, fps):.1f} frames")
            col.label(text=f"{derived} · {f_hz:.2f} Hz, damping {zeta:.2f}")
        except Exception as exc:  # noqa: BLE001 - drawing must not fail
            col.label(text=readout.sentence(exc), icon='ERROR')
    else:
        col.prop(chain, "frequency_hz")
        col.prop(chain, "damping_ratio")
    for prop in ("tip_looseness", "thickness_taper", "tip_mass", "gravity_scale", "body_response", "air_drag",
                 "bend_limit", "collision_radius", "substeps"):
        col.prop(chain, prop)


class VIEW3D_PT_overlap_assist_chains(OverlapPanelMixin, bpy.types.Panel):
    bl_label = "Chains"

    def draw(self, context):
        from . import preview
        from .chain_sim import chain_notes, chain_problem
        layout = self.layout
        obj = context.active_object
        s = obj.overlap_assist
        row = layout.row()
        row.template_list("OVERLAP_ASSIST_UL_chains", "", s, "chains", s, "active_chain", rows=3)
        col = row.column(align=True)
        col.operator("overlap_assist.add_chains", icon='ADD', text="")
        col.operator("overlap_assist.remove_chain", icon='REMOVE', text="")
        on = preview.PREVIEW.is_on(obj)
        row = layout.row(align=True)
        row.operator("overlap_assist.toggle_preview", text="Preview on" if on else "Live Preview",
                     icon='PAUSE' if on else 'PLAY', depress=on)
        row.operator("overlap_assist.frame_flight", icon='PREVIEW_RANGE')
        if not s.chains or not 0 <= s.active_chain < len(s.chains):
            layout.label(text="Select chain bones in pose mode, then Add Chains from Selection", icon='INFO')
            return
        chain = s.chains[s.active_chain]
        problem = chain_problem(obj, chain)
        if problem:
            layout.label(text=f"Chain {chain.name} {problem}", icon='ERROR')
        else:
            for note in chain_notes(obj, chain):
                layout.label(text=readout.sentence(note), icon='CONSTRAINT_BONE')
        layout.label(text=" → ".join(chain.bone_names()) or "(no bones)")
        row = layout.row(align=True)
        row.operator_menu_enum("overlap_assist.apply_preset", "preset", text=chain.preset or "Preset")
        row.operator("overlap_assist.save_preset", icon='FILE_TICK', text="")
        layout.use_property_split = True
        fps = context.scene.render.fps / context.scene.render.fps_base
        draw_chain_settings(layout, chain, fps)


class VIEW3D_PT_overlap_assist_colliders(OverlapPanelMixin, bpy.types.Panel):
    bl_label = "Colliders"
    bl_parent_id = "VIEW3D_PT_overlap_assist_chains"
    bl_options = {'DEFAULT_CLOSED'}

    def draw(self, context):
        s = context.active_object.overlap_assist
        row = self.layout.row()
        row.template_list("OVERLAP_ASSIST_UL_colliders", "", s, "colliders", s, "active_collider", rows=2)
        col = row.column(align=True)
        col.operator("overlap_assist.add_collider", icon='ADD', text="")
        col.operator("overlap_assist.remove_collider", icon='REMOVE', text="")
        row = self.layout.row(align=True)
        row.prop(s, "use_ground")
        sub = row.row()
        sub.active = s.use_ground
        sub.prop(s, "ground_height")


class VIEW3D_PT_overlap_assist_bake(OverlapPanelMixin, bpy.types.Panel):
    bl_label = "Bake"

    def draw(self, context):
        from . import bake_layer, stale_state
        layout = self.layout
        layout.use_property_split = True
        obj = context.active_object
        s = obj.overlap_assist
        layout.prop(s, "bake_scope")
        layout.prop(s, "bake_tolerance_deg")
        layout.prop(s, "bake_shared_frames")
        layout.prop(s, "bake_use_range")
        if s.bake_use_range:
            row = layout.row(align=True)
            row.prop(s, "bake_frame_start")
            row.prop(s, "bake_frame_end")
        row = layout.row(align=True)
        row.operator("overlap_assist.bake_chains", icon='REC')
        row.operator("overlap_assist.remove_bake", icon='TRASH')
        layout.operator("overlap_assist.bake_chains", text="Write into the Action…").into_action = True
        if bake_layer.has_bake(obj):
            layout.prop(s, "bake_influence")
            if stale_state.bake_state(obj) == "stale":   # cached: hashing every key per redraw is slow
                layout.label(text=bake_layer.STALE_MESSAGE, icon='ERROR')
        if s.last_bake:
            layout.label(text=s.last_bake, icon='INFO')


classes = (VIEW3D_PT_overlap_assist_body, VIEW3D_PT_overlap_assist_body_options, OVERLAP_ASSIST_UL_chains,
           OVERLAP_ASSIST_UL_colliders, VIEW3D_PT_overlap_assist_chains, VIEW3D_PT_overlap_assist_colliders,
           VIEW3D_PT_overlap_assist_bake)

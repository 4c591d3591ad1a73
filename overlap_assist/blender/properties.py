"""Settings stored on the armature object (``Object.overlap_assist``); they survive save/reload.

Defaults come from ``core.constants`` so UI and core cannot drift apart. ``body_settings`` is
the only bridge from these properties to the core's settings types.
"""
import bpy
from bpy.props import BoolProperty, EnumProperty, FloatProperty, IntProperty, StringProperty

from ..core import constants as C
from ..core.body_types import AnalysisSettings
from ..core.flight_fix import BLEND_FRAMES
from . import chain_props

BODY_SOURCES = (
    ("AUTO", "Automatic", "The center of mass when every body segment is matched to a bone, else the root bone"),
    ("ROOT", "Root bone", "Use one bone (the hips or root) as the body"),
    ("COM", "Center of mass", "Estimate the whole-body center of mass from deform bones with a segment table"),
)
SEGMENT_TABLES = (
    ("dempster", "Dempster (Winter 2009)", "Dempster 1955 cadaver data as tabulated by Winter 2009, Table 4.1"),
    ("de_leva_male", "de Leva 1996, male", "de Leva 1996, Table 4, males"),
    ("de_leva_female", "de Leva 1996, female", "de Leva 1996, Table 4, females"),
)
FIX_MODES = (
    ("KEEP_CONTACTS", "Keep contacts", "Takeoff and touchdown stay where and when they are; the apex moves"),
    ("KEEP_APEX", "Keep apex", "The apex stays; the frames to move takeoff and touchdown are advised, not changed"),
)
GRAVITY_SOURCES = (
    ("SCENE", "Scene gravity", "The scene's gravity vector (Scene Properties > Gravity), in scene units"),
    ("STANDARD", "Standard gravity", "9.80665 m/s² straight down, whatever the scene says"),
)


def _get_fix_influence(self):
    from . import flight_fix_layer
    value = flight_fix_layer.fix_influence(self.id_data)
    return 1.0 if value is None else float(value)


def _set_fix_influence(self, value):
    from . import flight_fix_layer
    if flight_fix_layer.set_fix_influence(self.id_data, value):
        self.id_data.update_tag(refresh={'TIME'})


class OverlapAssistBodySettings(bpy.types.PropertyGroup):
    body_source: EnumProperty(name="Body", items=BODY_SOURCES, default="AUTO",
                              description="What stands for the body's motion")
    body_bone: StringProperty(name="Root bone", default="",
                              description="Bone that carries the body (empty: a bone named like hips or pelvis, "
                                          "else the first top-level bone)")
    segment_table: EnumProperty(name="Segment table", items=SEGMENT_TABLES, default="dempster",
                                description="Mass share and center of mass of each body segment")
    bone_overrides: StringProperty(
        name="Bone overrides", default="",
        description="Manual bone choices for the center of mass, e.g. 'thigh.L=LegUp_L, hand.R=Palm_R'")
    contact_bones: StringProperty(
        name="Contact bones", default="",
        description="Bones that touch the ground, comma-separated, e.g. 'foot.L, toe.L, foot.R, toe.R' "
                    "(empty: the feet and toes found by name); bones of one side make one foot")
    gravity_source: EnumProperty(name="Gravity", items=GRAVITY_SOURCES, default="SCENE",
                                 description="Which gravity the body motion is compared with")
    samples_per_frame: IntProperty(name="Event sub-frames", default=C.SAMPLES_PER_FRAME, min=1, max=16,
                                   description="Sub-frame samples of the feet around takeoff and touchdown "
                                               "(the body is sampled at whole frames)")
    smoothing_window: FloatProperty(name="Smoothing (frames)", default=C.SMOOTHING_WINDOW_FRAMES,
                                    min=0.25, max=10.0, description="Savitzky–Golay window span in frames; "
                                    "raise it for noisy motion capture")
    smoothing_order: IntProperty(name="Smoothing order", default=C.SMOOTHING_ORDER, min=1, max=6,
                                 description="Degree of the polynomial fitted in each window (2 is exact for flight)")
    flight_threshold: FloatProperty(name="Flight threshold (g)", default=C.FLIGHT_LOAD_MAX, min=0.05, max=0.95,
                                    description="Load below which the body may be airborne")
    spline_blocked_keys: BoolProperty(
        name="Analyze blocked keys as splines", default=False,
        description="Evaluate stepped/constant keys as if they were Bézier, without changing the action")
    use_frame_range: BoolProperty(name="Custom range", default=False,
                                  description="Analyze a chosen range instead of the scene's frame range")
    frame_start: IntProperty(name="Start", default=1)
    frame_end: IntProperty(name="End", default=250)
    fix_mode: EnumProperty(name="Keep", items=FIX_MODES, default="KEEP_CONTACTS",
                           description="What Fix Flight's corrected arc keeps from the animation")
    fix_blend_frames: FloatProperty(name="Blend (frames)", default=BLEND_FRAMES, min=0.0, max=12.0,
                                    description="Frames over which Fix Flight fades its correction in before "
                                                "takeoff and out after touchdown")
    fix_influence: FloatProperty(name="Influence", min=0.0, max=1.0, subtype='FACTOR',
                                 get=_get_fix_influence, set=_set_fix_influence,
                                 description="How much of the flight fix is mixed over the animation (kept on "
                                             "the fix layer's strip itself)")
    owned_markers: StringProperty(name="Markers", default="", options={'HIDDEN'},
                                  description="Names of the timeline markers the last analysis set (JSON)")
    last_summary: StringProperty(name="Last result", default="",
                                 description="JSON summary of the last analysis (shown in the panel)")

    def analysis_settings(self) -> AnalysisSettings:
        return AnalysisSettings(smoothing_window_frames=self.smoothing_window,
                                smoothing_order=self.smoothing_order,
                                flight_load_max=self.flight_threshold)

    def overrides(self) -> dict:
        """Parse 'role=bone, role=bone' into a dict (blank entries ignored)."""
        out = {}
        for item in self.bone_overrides.split(","):
            if "=" in item:
                role, bone = (s.strip() for s in item.split("=", 1))
                if role and bone:
                    out[role] = bone
        return out


def _bake_influence_changed(self, context):
    from . import bake_layer
    bake_layer.set_bake_influence(self.id_data, self.bake_influence)


def _preview_changed(self, context):
    from . import preview
    preview.mark_dirty(settings_only=True)


class OverlapAssistSettings(bpy.types.PropertyGroup):
    """Everything Overlap Assist stores on one armature object."""
    body: bpy.props.PointerProperty(type=OverlapAssistBodySettings)
    chains: bpy.props.CollectionProperty(type=chain_props.OverlapAssistChain)
    active_chain: IntProperty(name="Active chain", default=0, min=0)
    colliders: bpy.props.CollectionProperty(type=chain_props.OverlapAssistCollider)
    active_collider: IntProperty(name="Active collider", default=0, min=0)
    use_ground: BoolProperty(name="Ground", default=True, update=_preview_changed,
                             description="Keep chains above a horizontal ground plane")
    ground_height: FloatProperty(name="Ground height", default=0.0, subtype='DISTANCE', update=_preview_changed,
                                 description="Height of the ground plane (scene units)")


    bake_scope: EnumProperty(name="Bake", items=(("ALL", "All chains", "Bake every chain that is not muted"),
                                                 ("SELECTED", "Selected", "Bake chains with a selected bone")),
                             default="ALL")
    bake_tolerance_deg: FloatProperty(name="Key tolerance (°)", default=0.5, min=0.0, max=10.0,
                                      description="Largest difference allowed between the keys and the simulation; "
                                                  "0 keeps a key on every frame")
    bake_shared_frames: BoolProperty(
        name="Shared key frames", default=False,
        description="Key all rotation channels of a bone on the same frames (more keys, easier to retime by "
                    "hand); off, each channel is keyed only where it needs keys (fewest keys)")
    bake_use_range: BoolProperty(name="Custom range", default=False,
                                 description="Bake (and preview) a chosen range instead of the scene's frame range")
    bake_frame_start: IntProperty(name="Start", default=1)
    bake_frame_end: IntProperty(name="End", default=250)
    bake_influence: FloatProperty(name="Influence", default=1.0, min=0.0, max=1.0, subtype='FACTOR',
                                  update=_bake_influence_changed,
                                  description="How much of the baked layer is mixed over the animation")
    last_bake: StringProperty(name="Last bake", default="")


classes = (OverlapAssistBodySettings, *chain_props.classes, OverlapAssistSettings)

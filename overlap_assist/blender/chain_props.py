"""Chains and colliders stored on the armature (``Object.overlap_assist.chains`` etc.).

Each chain keeps its bones in order (root-most first) and its own response settings. Animator
controls (Lag, Settle, Bounce in frames and %) and physical controls (Frequency, Damping ratio)
describe the same second-order response; ``chain_settings`` turns either into the core's
``ChainSettings``. Every edit marks the preview cache stale.
"""
import math

import bpy
from bpy.props import (BoolProperty, CollectionProperty, EnumProperty, FloatProperty, IntProperty,
                       StringProperty)

from ..core import response
from ..core.chain_types import ChainSettings

RESPONSE_MODES = (
    ("ANIMATOR", "Frames", "Describe the response in frames: Bounce, and Settle or Lag"),
    ("PHYSICAL", "Physical", "Describe the response by its natural frequency and damping ratio"),
)
TIME_DRIVERS = (
    ("SETTLE", "Settle", "Settle (frames) sets the speed; Lag is derived"),
    ("LAG", "Lag", "Lag (frames) sets the speed; Settle is derived"),
)
COLLIDER_SHAPES = (
    ("SPHERE", "Sphere", "A ball around the bone's middle (radius)"),
    ("CAPSULE", "Capsule", "A rounded cylinder from the bone's head to its tail (radius)"),
)


def _changed(self, context):
    from . import preview
    preview.mark_dirty(settings_only=True)


class OverlapAssistChainBone(bpy.types.PropertyGroup):
    """One bone of a chain (``name`` is the bone name)."""


class OverlapAssistChain(bpy.types.PropertyGroup):
    bones: CollectionProperty(type=OverlapAssistChainBone)
    mute: BoolProperty(name="Mute", default=False, update=_changed,
                       description="Leave this chain out of the preview and the bake")
    preset: StringProperty(name="Preset", default="", description="Preset last applied to this chain")
    response_mode: EnumProperty(name="Response", items=RESPONSE_MODES, default="ANIMATOR", update=_changed)
    time_driver: EnumProperty(name="Speed from", items=TIME_DRIVERS, default="SETTLE", update=_changed)
    lag_frames: FloatProperty(name="Lag (frames)", default=2.0, min=0.1, max=60.0, update=_changed,
                              description="How many frames the chain trails a steady motion of the body")
    settle_frames: FloatProperty(name="Settle (frames)", default=18.0, min=1.0, max=240.0, update=_changed,
                                 description="Frames until the chain stays within 2 % of rest after a stop")
    bounce: FloatProperty(name="Bounce (%)", default=25.0, min=0.0, max=90.0, subtype='PERCENTAGE', update=_changed,
                          description="How far the chain swings past its rest after a stop")
    frequency_hz: FloatProperty(name="Frequency (Hz)", default=2.0, min=0.0, max=10.0, update=_changed,
                                description="Natural frequency of the whole chain's springs toward the animated pose "
                                            "(its lowest mode, anchor to tip); 0 = no springs")
    damping_ratio: FloatProperty(name="Damping ratio", default=0.4, min=0.0, max=2.0, update=_changed,
                                 description="1 = no overshoot; lower swings more")
    tip_looseness: FloatProperty(name="Tip looseness", default=0.3, min=0.0, max=1.0, subtype='FACTOR',
                                 update=_changed, description="How much softer the joint springs get toward the tip")
    gravity_scale: FloatProperty(name="Gravity (× g)", default=1.0, min=0.0, max=3.0, update=_changed,
                                 description="Multiplier of gravity on this chain")
    body_response: FloatProperty(name="Body response (×)", default=1.0, min=0.0, max=3.0, update=_changed,
                                 description="Multiplier of what the chain feels of the body's acceleration: "
                                             "1 is physical, above 1 exaggerates float, drag and whip")
    air_drag: FloatProperty(name="Air drag", default=0.0, min=0.0, max=10.0, update=_changed,
                            description="Drag on the chain's motion through the air (1/s)")
    bend_limit: FloatProperty(name="Bend limit", default=math.pi, min=math.radians(5), max=math.pi,
                              subtype='ANGLE', update=_changed,
                              description="Largest angle a link may swing away from its animated direction")
    collision_radius: FloatProperty(name="Collision radius", default=0.0, min=0.0, max=1.0, subtype='DISTANCE',
                                    update=_changed, description="Thickness of the chain against colliders (meters)")
    thickness_taper: FloatProperty(name="Thickness taper", default=0.0, min=0.0, max=0.95, subtype='FACTOR',
                                   update=_changed,
                                   description="How much thinner (lighter per length) the chain gets from root to "
                                               "tip: 0 uniform, 0.8 a tapering tail")
    tip_mass: FloatProperty(name="Tip mass (× chain)", default=0.0, min=0.0, max=20.0, update=_changed,
                            description="A weight hanging at the chain's end (a bag on a strap), as a multiple "
                                        "of the chain's own mass; 0 = none")
    substeps: IntProperty(name="Sub-steps", default=ChainSettings().substeps, min=1, max=16, update=_changed,
                          description="Solver steps per frame (stiff settings add more automatically)")

    def bone_names(self):
        return [b.name for b in self.bones]

    def physical(self, fps):
        """(frequency_hz, damping_ratio) from whichever controls are in use."""
        if self.response_mode == "PHYSICAL":
            return self.frequency_hz, self.damping_ratio
        bounce = self.bounce / 100.0
        if self.time_driver == "LAG":
            return response.response_from_bounce_lag(bounce, self.lag_frames, fps)
        return response.response_from_bounce_settle(bounce, self.settle_frames, fps)

    def chain_settings(self, fps, scale_length=1.0):
        f_hz, zeta = self.physical(fps)
        return ChainSettings(frequency_hz=f_hz, damping_ratio=zeta, tip_looseness=self.tip_looseness,
                             gravity_scale=self.gravity_scale, body_response=self.body_response,
                             air_drag=self.air_drag, bend_limit_rad=min(self.bend_limit, math.pi),  # float32 pi > pi
                             collision_radius_m=self.collision_radius * scale_length, substeps=self.substeps,
                             thickness_taper=self.thickness_taper, tip_mass_ratio=self.tip_mass)

    def apply_physical(self, frequency_hz, damping_ratio, fps):
        """Set both control sets from physical values (keeps the chosen mode)."""
        self.frequency_hz, self.damping_ratio = frequency_hz, damping_ratio
        if frequency_hz > 0:
            self.bounce = 100.0 * response.bounce_of(damping_ratio)
            self.settle_frames = min(max(response.settle_frames_of(frequency_hz, damping_ratio, fps), 1.0), 240.0)
            self.lag_frames = min(max(response.lag_frames_of(frequency_hz, damping_ratio, fps), 0.1), 60.0)

    def preset_values(self, fps):
        f_hz, zeta = self.physical(fps)
        return {"frequency_hz": round(f_hz, 4), "damping_ratio": round(zeta, 4),
                "tip_looseness": self.tip_looseness, "gravity_scale": self.gravity_scale,
                "body_response": self.body_response, "air_drag": self.air_drag,
                "bend_limit_deg": round(math.degrees(self.bend_limit), 3),
                "collision_radius_m": self.collision_radius, "substeps": self.substeps,
                "thickness_taper": self.thickness_taper, "tip_mass_ratio": self.tip_mass}

    def apply_preset(self, doc, fps):
        s = doc["settings"]
        self.apply_physical(s.get("frequency_hz", self.frequency_hz), s.get("damping_ratio", self.damping_ratio), fps)
        if s.get("frequency_hz", 1.0) == 0:
            self.response_mode = "PHYSICAL"  # a free pendulum has no lag/settle in frames
        for key, attr in (("tip_looseness", "tip_looseness"), ("gravity_scale", "gravity_scale"),
                          ("body_response", "body_response"), ("air_drag", "air_drag"),
                          ("collision_radius_m", "collision_radius"), ("substeps", "substeps"),
                          ("thickness_taper", "thickness_taper"), ("tip_mass_ratio", "tip_mass")):
            if key in s:
                setattr(self, attr, s[key])
        if "bend_limit_deg" in s:
            self.bend_limit = math.radians(s["bend_limit_deg"])
        self.preset = doc["name"]


class OverlapAssistCollider(bpy.types.PropertyGroup):
    bone: StringProperty(name="Bone", update=_changed, description="Body bone the collider moves with")
    shape: EnumProperty(name="Shape", items=COLLIDER_SHAPES, default="CAPSULE", update=_changed)
    radius: FloatProperty(name="Radius", default=0.1, min=0.001, max=2.0, subtype='DISTANCE', update=_changed,
                          description="Collider radius (meters)")


classes = (OverlapAssistChainBone, OverlapAssistChain, OverlapAssistCollider)

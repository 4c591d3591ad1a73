"""Operators for chains: add from selection, remove, presets, colliders, preview, frame flight."""
import json
import os

import bpy
from bpy.props import EnumProperty, IntProperty, StringProperty

from ..core import presets
from ..core.errors import OverlapAssistError
from . import chain_sim, preview
from .selection import OnArmature, armature_poll, bone_selected
from .op_errors import guarded


def split_chains(selected, parent_of, children_of):
    """Split selected bones into chains by hierarchy.

    Each selected bone whose parent is not selected starts a chain that runs down its selected
    children; where a bone has several selected children (a branch), each child starts a new chain.

    Parameters
    ----------
    selected : list of bone names, in armature order
    parent_of : name -> parent name or None
    children_of : name -> list of child names

    Returns
    -------
    list of lists of bone names, root-most first
    """
    chosen = set(selected)
    starts = [b for b in selected if parent_of(b) not in chosen]
    chains, queue = [], list(starts)
    while queue:
        bone = queue.pop(0)
        chain = [bone]
        while True:
            kids = [c for c in children_of(chain[-1]) if c in chosen]
            if len(kids) == 1:
                chain.append(kids[0])
                continue
            queue.extend(kids)  # a branch: every selected child starts its own chain
            break
        chains.append(chain)
    return chains


def chain_check_notes(obj, names):
    """Check a new chain (raises OverlapAssistError naming the bone and what to do); returns lines
    saying which bones its keys go on where constraints sit in between."""
    from . import chain_check, rig_drive
    problem = chain_check.path_problem(obj, names)
    if problem:
        raise OverlapAssistError(f"chain {names[0]} {problem}")
    drives = rig_drive.resolve_chain(obj, names)
    problem = chain_check.lock_problem(obj, [d.key_bone for d in drives])
    if problem:
        parent = obj.data.bones[drives[0].key_bone].parent
        if parent is not None and not any(obj.pose.bones[parent.name].lock_rotation):
            problem += f" (it follows {parent.name}: select the bones of that chain instead)"
        raise OverlapAssistError(problem)
    return [d.note() for d in drives if d.note()]


def user_preset_dir():
    return os.path.join(bpy.utils.user_resource('CONFIG', path="overlap_assist"), "presets")


def preset_items(self, context):
    items = []
    try:
        found = presets.shipped_presets()
    except OverlapAssistError:
        found = {}
    for key, doc in found.items():
        items.append((key, doc["name"], doc["note"]))
    udir = user_preset_dir()
    if os.path.isdir(udir):
        for fn in sorted(os.listdir(udir)):
            if fn.endswith(".json"):
                key = "user:" + fn[:-5]
                items.append((key, fn[:-5].replace("_", " ").title() + " (yours)", "Your saved preset"))
    preset_items.cache = items  # keep the strings alive (Blender enum callback rule)
    return items


def load_preset(key):
    if key.startswith("user:"):
        return presets.load_preset_file(os.path.join(user_preset_dir(), key[5:] + ".json"))
    return presets.shipped_presets()[key]


def _chain_poll(cls, context):
    if not armature_poll(cls, context):
        return False
    if _active_chain(context) is None:
        cls.poll_message_set("No chain selected in the list")
        return False
    return True


def _active_chain(context):
    s = context.active_object.overlap_assist
    if not s.chains or not 0 <= s.active_chain < len(s.chains):
        return None
    return s.chains[s.active_chain]


@guarded
class OVERLAP_ASSIST_OT_add_chains(OnArmature, bpy.types.Operator):
    """Turn the selected pose bones into chains (one per selected branch); the first bone's parent is the anchor"""
    bl_idname = "overlap_assist.add_chains"
    bl_label = "Add Chains from Selection"

    preset: EnumProperty(name="Preset", items=preset_items, description="Settings for the new chains")

    def execute(self, context):
        obj = context.active_object
        selected = [pb.name for pb in obj.pose.bones if bone_selected(obj, pb.name)]
        if not selected:
            self.report({'ERROR'}, "Select the chain's bones in pose mode first (root to tip)")
            return {'CANCELLED'}
        settings = obj.overlap_assist
        taken = {b for c in settings.chains for b in c.bone_names()}
        bones = obj.data.bones
        groups = split_chains(selected, lambda b: bones[b].parent.name if bones[b].parent else None,
                              lambda b: [c.name for c in bones[b].children])
        fps = context.scene.render.fps / context.scene.render.fps_base
        added, skipped = 0, []
        doc = load_preset(self.preset) if self.preset else None
        fresh = [g for g in groups if not any(b in taken for b in g)]
        try:
            notes = [note for g in fresh for note in chain_check_notes(obj, g)]
        except OverlapAssistError as exc:
            self.report({'ERROR'}, f"{exc} (no chain was added)")
            return {'CANCELLED'}
        for group in groups:
            if group not in fresh:
                skipped.append(group[0])
                continue
            chain = settings.chains.add()
            chain.name = group[0]
            for b in group:
                chain.bones.add().name = b
            if doc:
                chain.apply_preset(doc, fps)
            added += 1
        settings.active_chain = len(settings.chains) - 1
        preview.mark_dirty()
        if skipped:
            self.report({'WARNING'}, f"Skipped bones already in a chain: {', '.join(skipped)}")
        if not added:
            return {'CANCELLED'}
        self.report({'INFO'}, f"Added {added} chain{'s' if added != 1 else ''} "
                              f"({sum(len(g) for g in fresh)} bones)" + "".join(f"; {n}" for n in notes))
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_remove_chain(bpy.types.Operator):
    """Remove the active chain (its bones and animation are not touched)"""
    bl_idname = "overlap_assist.remove_chain"
    bl_label = "Remove Chain"
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        return _chain_poll(cls, context)

    def execute(self, context):
        s = context.active_object.overlap_assist
        name = s.chains[s.active_chain].name
        s.chains.remove(s.active_chain)
        s.active_chain = max(0, min(s.active_chain, len(s.chains) - 1))
        preview.mark_dirty()
        self.report({'INFO'}, f"Removed chain {name}")
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_apply_preset(bpy.types.Operator):
    """Set the active chain's settings from a preset"""
    bl_idname = "overlap_assist.apply_preset"
    bl_label = "Apply Preset"
    bl_options = {'REGISTER', 'UNDO'}

    preset: EnumProperty(name="Preset", items=preset_items)

    @classmethod
    def poll(cls, context):
        return _chain_poll(cls, context)

    def execute(self, context):
        try:
            doc = load_preset(self.preset)
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        fps = context.scene.render.fps / context.scene.render.fps_base
        _active_chain(context).apply_preset(doc, fps)
        self.report({'INFO'}, f"Applied preset {doc['name']}")
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_save_preset(bpy.types.Operator):
    """Save the active chain's settings as your own preset"""
    bl_idname = "overlap_assist.save_preset"
    bl_label = "Save Preset"

    name: StringProperty(name="Name", default="My preset")

    @classmethod
    def poll(cls, context):
        return _chain_poll(cls, context)

    def invoke(self, context, event):
        return context.window_manager.invoke_props_dialog(self)

    def execute(self, context):
        fps = context.scene.render.fps / context.scene.render.fps_base
        try:
            path = presets.save_preset(user_preset_dir(), self.name, _active_chain(context).preset_values(fps),
                                       note="Saved from a chain's settings")
        except OverlapAssistError as exc:
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        self.report({'INFO'}, f"Saved preset to {path}")
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_add_collider(bpy.types.Operator):
    """Make the active pose bone a collider the chains stay out of"""
    bl_idname = "overlap_assist.add_collider"
    bl_label = "Add Collider"
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        if context.active_pose_bone is None:
            cls.poll_message_set("Make a body bone active in pose mode")
            return False
        return True

    def execute(self, context):
        s = context.active_object.overlap_assist
        pb = context.active_pose_bone
        col = s.colliders.add()
        col.name = col.bone = pb.name
        col.radius = max(0.25 * pb.bone.length, 0.01)
        s.active_collider = len(s.colliders) - 1
        preview.mark_dirty()
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_remove_collider(bpy.types.Operator):
    """Remove the active collider"""
    bl_idname = "overlap_assist.remove_collider"
    bl_label = "Remove Collider"
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        return len(context.active_object.overlap_assist.colliders) > 0

    def execute(self, context):
        s = context.active_object.overlap_assist
        s.colliders.remove(min(s.active_collider, len(s.colliders) - 1))
        s.active_collider = max(0, min(s.active_collider, len(s.colliders) - 1))
        preview.mark_dirty()
        return {'FINISHED'}


def _preview_can_pose(obj, chains):
    """The preview poses chain bones directly; chains moved through constraints need the bake."""
    from . import rig_drive
    for c in chains:
        drives = rig_drive.resolve_chain(obj, c.bone_names())
        if rig_drive.needs_solving(drives):
            raise OverlapAssistError(
                f"chain '{c.name}' is moved through constraints ({drives[0].note()}): the live preview cannot "
                "show it; bake it (the bake solves for the controls that reach it)")


@guarded
class OVERLAP_ASSIST_OT_toggle_preview(bpy.types.Operator):
    """Show the chains' simulated motion while scrubbing or playing, without creating keys"""
    bl_idname = "overlap_assist.toggle_preview"
    bl_label = "Live Preview"

    @classmethod
    def poll(cls, context):
        return armature_poll(cls, context)

    def execute(self, context):
        obj, scene = context.active_object, context.scene
        if preview.PREVIEW.is_on(obj):
            preview.PREVIEW.stop(obj, scene)
            self.report({'INFO'}, "Preview off: animated pose restored")
            return {'FINISHED'}
        try:
            _preview_can_pose(obj, chain_sim.active_chains(obj))
            preview.PREVIEW.start(obj)
            with preview.suspended():
                preview.PREVIEW.ensure_solved(obj, scene)
        except OverlapAssistError as exc:
            preview.PREVIEW.stop(obj)
            self.report({'ERROR'}, str(exc))
            return {'CANCELLED'}
        scene.frame_set(scene.frame_current)
        self.report({'INFO'}, "Preview on")
        return {'FINISHED'}


@guarded
class OVERLAP_ASSIST_OT_frame_flight(bpy.types.Operator):
    """Set the preview range to the analysed flight plus a few frames either side, to loop the float"""
    bl_idname = "overlap_assist.frame_flight"
    bl_label = "Frame Flight"
    bl_options = {'REGISTER', 'UNDO'}

    margin: IntProperty(name="Margin (frames)", default=4, min=0, max=48)
    flight: IntProperty(name="Flight", default=1, min=1, description="Which flight, counted from 1")

    @classmethod
    def poll(cls, context):
        if not armature_poll(cls, context):
            return False
        if not context.active_object.overlap_assist.body.last_summary:
            cls.poll_message_set("Run Analyze Body Motion first")
            return False
        return True

    def execute(self, context):
        summary = json.loads(context.active_object.overlap_assist.body.last_summary)
        flights = summary.get("flights", [])
        if len(flights) < self.flight:
            self.report({'ERROR'}, "The last analysis found no such flight: analyze a clip with a jump")
            return {'CANCELLED'}
        fl = flights[self.flight - 1]
        scene = context.scene
        scene.use_preview_range = True
        scene.frame_preview_start = int(fl["takeoff_frame"]) - self.margin
        scene.frame_preview_end = int(fl["touchdown_frame"] + 0.999) + self.margin
        self.report({'INFO'}, f"Preview range {scene.frame_preview_start}-{scene.frame_preview_end}")
        return {'FINISHED'}


classes = (OVERLAP_ASSIST_OT_add_chains, OVERLAP_ASSIST_OT_remove_chain, OVERLAP_ASSIST_OT_apply_preset,
           OVERLAP_ASSIST_OT_save_preset, OVERLAP_ASSIST_OT_add_collider, OVERLAP_ASSIST_OT_remove_collider,
           OVERLAP_ASSIST_OT_toggle_preview, OVERLAP_ASSIST_OT_frame_flight)

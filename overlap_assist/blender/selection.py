"""What the operators act on: the active armature, and which pose bones are selected."""


def armature_poll(cls, context):
    """Poll helper: the active object must be an armature (says why otherwise)."""
    obj = context.active_object
    if obj is None or obj.type != 'ARMATURE':
        cls.poll_message_set("Select the character's armature")
        return False
    return True


class OnArmature:
    """Mixin for an operator on the active armature that changes the file: one undo step, and a
    poll that says what to select."""
    bl_options = {'REGISTER', 'UNDO'}

    @classmethod
    def poll(cls, context):
        return armature_poll(cls, context)


def bone_selected(obj, name):
    """Is the pose bone selected? (5.x: PoseBone.select; 4.5: Bone.select)."""
    pb = obj.pose.bones.get(name)
    if pb is None:
        return False
    return pb.select if hasattr(pb, "select") else obj.data.bones[name].select

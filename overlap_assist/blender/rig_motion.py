"""What can move an armature in the world: its own animation, a parent's, or a constraint.

The analysis measures the body's *world* motion, so a rig carried by an animated parent, a
Child Of constraint or the object's own keys all count. This module only answers "could
anything move it?" without evaluating the scene (cheap, for choosing what to process); the
sampler still measures the motion and says when the body does not move.
"""

MAX_DEPTH = 16
"""How far to follow parents and constraint targets (guards against cycles in broken files)."""


def _animated(ob):
    ad = ob.animation_data
    return ad is not None and (ad.action is not None or len(ad.nla_tracks) > 0 or len(ad.drivers) > 0)


def _constraint_targets(ob):
    """Objects that enabled constraints of ``ob`` (object and, for armatures, pose bones) follow."""
    constraints = list(ob.constraints)
    if ob.type == 'ARMATURE' and ob.pose is not None:
        constraints += [c for pb in ob.pose.bones for c in pb.constraints]
    for c in constraints:
        if getattr(c, "mute", False) or not getattr(c, "enabled", True):
            continue
        target = getattr(c, "target", None)
        if target is not None:
            yield target
        for t in getattr(c, "targets", ()) or ():   # Armature constraint
            if getattr(t, "target", None) is not None:
                yield t.target


def motion_source(obj):
    """The first object whose animation can move ``obj`` in the world (``obj`` itself, a parent or a
    constraint target, followed recursively), or None when nothing can."""
    seen, todo = set(), [(obj, 0)]
    while todo:
        ob, depth = todo.pop(0)
        if ob is None or ob.name in seen or depth > MAX_DEPTH:
            continue
        seen.add(ob.name)
        if _animated(ob):
            return ob
        todo.append((ob.parent, depth + 1))
        todo += [(t, depth + 1) for t in _constraint_targets(ob) if t is not ob]
    return None


def has_motion(obj) -> bool:
    return motion_source(obj) is not None

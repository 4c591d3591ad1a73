"""Which bone's keys reach a chain bone: constraints between controls and deform bones.

Production rigs put constraints between the bones animators key (controls) and the bones the
mesh follows (deform bones). For each chain bone this module follows the constraints that decide
its rotation to the bone whose rotation keys move it (its *key bone*):

- no active constraint: the bone itself;
- Copy Transforms, or Copy Rotation of all three axes, mixing Replace at full influence from a
  bone of the same armature: whatever drives that target (Rigify: DEF- copies ORG-, ORG- copies
  the control);
- Stretch To / Damped Track / Track To / Locked Track aimed at a bone: the direction comes from
  where the target's head is, so the key bone is the ancestor of the target that pivots at this
  bone's head (Rigify tentacles: ORG- aims at the next tweak, which rides on the next FK control,
  which hangs from this bone's FK control);
- other constraints (Child Of, Copy Rotation mixed before/after/offset, Limit ...): the bone
  itself, with constraints between its keys and its pose;
- IK on the bone or on a descendant that reaches it, constraints targeting another object, or an
  aim whose target no bone pivots: refused, naming the bone and what to pick instead.

Where constraints sit between (any key bone other than the chain bone, or constraints on it),
the bake solves for the key bones' rotations by evaluating the rig (``control_solve``).
"""
from dataclasses import dataclass

from ..core.errors import InvalidChainError

COPIES = {'COPY_TRANSFORMS', 'COPY_ROTATION'}
AIMS = {'STRETCH_TO', 'DAMPED_TRACK', 'TRACK_TO', 'LOCKED_TRACK'}
PIVOT_TOLERANCE = 0.01
"""Share of the bone's length within which a bone's head counts as this bone's pivot."""
MAX_DEPTH = 12


@dataclass(frozen=True, slots=True)
class Drive:
    """How one chain bone is moved by keys."""

    bone: str
    """The chain bone (sampled and simulated: its pose is what the mesh follows)."""
    key_bone: str
    """The bone whose rotation keys move it (the bone itself on a plain rig)."""
    via: tuple
    """Constraints followed, as text ("Copy Transforms from ORG-x", ...); empty on a plain rig."""
    constrained: bool
    """True when constraints sit between the key bone's keys and the chain bone's pose."""

    def note(self) -> str:
        if not self.via and not self.constrained:
            return ""
        if self.key_bone == self.bone:
            return f"{self.bone}: keyed on itself, its constraints solved for"
        return f"{self.bone} is driven by {self.key_bone} ({', '.join(self.via)}): keys go on {self.key_bone}"


def _active(pb):
    return [c for c in pb.constraints if c.enabled and c.influence > 0.0]


def _label(c):
    return c.bl_rna.name.replace(" Constraint", "")


def _replaces_rotation(c):
    if c.type == 'COPY_TRANSFORMS':
        return c.mix_mode == 'REPLACE' and c.influence >= 1.0
    if c.type == 'COPY_ROTATION':
        return c.mix_mode == 'REPLACE' and c.influence >= 1.0 and c.use_x and c.use_y and c.use_z \
            and not (c.invert_x or c.invert_y or c.invert_z)
    return False


def _ik_reaching(obj, name):
    """(owner, constraint) of an IK constraint that poses bone ``name``, or None."""
    pose = obj.pose.bones
    for pb in [pose[name]] + [pose[d.name] for d in obj.data.bones[name].children_recursive]:
        for c in _active(pb):
            if c.type not in {'IK', 'SPLINE_IK'}:
                continue
            depth = pb.bone.parent_recursive.index(obj.data.bones[name]) + 1 if pb.name != name else 0
            count = c.chain_count
            if count == 0 or depth < count:
                return pb.name, c
    return None


def _pivot_ancestor(obj, target, bone):
    """The ancestor of ``target`` (or ``target``) whose rest head is at ``bone``'s rest head."""
    bones = obj.data.bones
    head, tol = bones[bone].head_local, PIVOT_TOLERANCE * bones[bone].length
    for b in [bones[target]] + list(bones[target].parent_recursive):
        if (b.head_local - head).length <= tol and b.name != bone:
            return b.name
    return None


def resolve_bone(obj, name):
    """The Drive of one chain bone; raises InvalidChainError naming the bone to pick instead."""
    ik = _ik_reaching(obj, name)
    if ik is not None:
        owner, c = ik
        target = f" (target {c.subtarget or c.target.name})" if c.target is not None else ""
        raise InvalidChainError(
            f"bone {name} is posed by the IK constraint '{c.name}' of {owner}{target}: rotation keys would not "
            f"reach it; mute that constraint or build the chain from the FK bones it follows")
    via, current, constrained = [], name, False
    for _ in range(MAX_DEPTH):
        cons = _active(obj.pose.bones[current])
        if not cons:
            break
        aim = next((c for c in reversed(cons) if c.type in AIMS), None)
        copy = next((c for c in reversed(cons) if _replaces_rotation(c)), None)
        decider = aim or copy
        if decider is None:
            constrained = True   # Child Of, Copy Rotation mixed in, limits: its own keys still reach it
            break
        if decider.target is not obj or not decider.subtarget:
            raise InvalidChainError(
                f"bone {current} takes its rotation from {decider.target.name if decider.target else 'nothing'} "
                f"('{decider.name}'), not from a bone of {obj.name}: pick the bones that object's keys move")
        via.append(f"{_label(decider)} to {decider.subtarget}" if decider is aim
                   else f"{_label(decider)} from {decider.subtarget}")
        if decider is aim:
            pivot = _pivot_ancestor(obj, decider.subtarget, name)
            if pivot is None:
                raise InvalidChainError(
                    f"bone {name} is aimed at {decider.subtarget} by '{decider.name}' and no bone that moves "
                    f"{decider.subtarget} turns about {name}'s head: pick the bones that move {decider.subtarget}")
            current = pivot
            constrained = True
        else:
            current = decider.subtarget
        if current == name:
            break
    else:
        raise InvalidChainError(f"bone {name}: its constraints lead in a circle; pick the bones animators key")
    constrained = constrained or bool(_active(obj.pose.bones[current])) or current != name
    return Drive(name, current, tuple(via), constrained)


def resolve_chain(obj, names):
    """[Drive] for a chain's bones (root to tip); refuses two chain bones driven by one key bone."""
    drives = [resolve_bone(obj, n) for n in names]
    seen = {}
    for d in drives:
        if d.key_bone in seen:
            raise InvalidChainError(
                f"bones {seen[d.key_bone]} and {d.bone} are both driven by {d.key_bone}: one bone's keys cannot "
                "give both their directions; leave one of them out of the chain")
        seen[d.key_bone] = d.bone
    return drives


def key_bones(obj, names):
    """The bones a chain's keys go on, or the chain's own bones when it cannot be resolved."""
    if any(n not in obj.pose.bones for n in names):
        return list(names)
    try:
        return [d.key_bone for d in resolve_chain(obj, names)]
    except InvalidChainError:
        return list(names)


def needs_solving(drives) -> bool:
    return any(d.constrained for d in drives)

"""Is a list of bones a chain the solver can simulate and the bake can key? One line says why not.

A chain is a path down the hierarchy: each bone the direct child of the one before, root to tip,
each bone once, joined end to end (a bone's head at its parent's tail, as the solver's links are),
with some length, and in no other chain. Bones whose keys the bake writes must have their rotation
unlocked. Every message names the bone and says what to do; nothing is changed.
"""
from ..core.errors import InvalidChainError

GAP_FRACTION = 0.01
"""A head farther than this share of the parent's length from the parent's tail is not joined (the
solver puts each link's start at the previous link's end; 1 % is far above float rounding)."""
GAP_MIN_BU = 1e-5


def _ordered(bones, names):
    """The names in parent -> child order if they form one unbranched path, else None."""
    chosen = set(names)
    roots = [n for n in names if bones[n].parent is None or bones[n].parent.name not in chosen]
    if len(roots) != 1:
        return None
    out = roots
    while len(out) < len(names):
        kids = [c.name for c in bones[out[-1]].children if c.name in chosen]
        if len(kids) != 1:
            return None
        out.append(kids[0])
    return out


def path_problem(obj, names):
    """A line saying why ``names`` (root to tip) is not a chain of ``obj``, or None."""
    if not names:
        return "has no bones: remove it and add it again from a selection"
    bones = obj.data.bones
    missing = [n for n in names if n not in bones]
    if missing:
        return (f"bone{'s' if len(missing) > 1 else ''} {', '.join(missing)} not found (renamed or deleted?): "
                "rename the bone back, or remove the chain and add it again from a selection")
    seen = set()
    for n in names:
        if n in seen:
            return f"lists bone {n} twice: list each bone once, root to tip"
        seen.add(n)
    zero = [n for n in names if bones[n].length <= 0]
    if zero:
        return f"bone {zero[0]} has no length"
    for prev, name in zip(names, names[1:]):
        parent = bones[name].parent
        if parent is not None and parent.name == prev:
            continue
        order = _ordered(bones, names)
        if order is not None:
            return f"bones are not in parent -> child order: list them as {', '.join(order)} (root to tip)"
        return (f"bone {name} is not a child of {prev} (its parent is {parent.name if parent else 'none'}): "
                "a chain runs from a bone down through its children, none left out")
    for prev, name in zip(names, names[1:]):
        gap = (bones[name].head_local - bones[prev].tail_local).length
        if gap > max(GAP_FRACTION * bones[prev].length, GAP_MIN_BU):
            return (f"bone {name} does not start at the tail of {prev} (gap {gap:.3g}): the chain's links must "
                    "join end to end; pick bones that do (on Rigify rigs the chain's FK controls, ORG- or DEF- bones)")
    return None


def lock_problem(obj, key_names):
    """A line if a bone the bake keys has locked rotation channels (the keys would override the lock)."""
    for name in key_names:
        pb = obj.pose.bones[name]
        axes = [a for a, locked in zip("XYZ", pb.lock_rotation) if locked]
        if pb.rotation_mode in {'QUATERNION', 'AXIS_ANGLE'} and pb.lock_rotations_4d and pb.lock_rotation_w:
            axes.insert(0, "W")
        if axes:
            return (f"bone {name} has its rotation locked ({', '.join(axes)}): the bake would rotate it anyway; "
                    "unlock its rotation (N panel > Bone > Transform, lock icons) or leave it out of the chain")
    return None


def shared_problem(chains_bones):
    """A line if a bone is in two chains: ``chains_bones`` is [(chain name, [bone names])]."""
    owner = {}
    for chain, names in chains_bones:
        for n in names:
            if n in owner and owner[n] != chain:
                return f"bone {n} is in chains {owner[n]} and {chain}: remove it from one of them"
            owner.setdefault(n, chain)
    return None


def check_chains(obj, chains):
    """Raise InvalidChainError naming the chain, the bone and what to do, for the first problem found."""
    for c in chains:
        problem = path_problem(obj, c.bone_names())
        if problem:
            raise InvalidChainError(f"chain '{c.name}' {problem}")
    problem = shared_problem([(c.name, c.bone_names()) for c in chains])
    if problem:
        raise InvalidChainError(problem)

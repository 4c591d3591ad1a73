"""The bake's stale check for panels, without hashing the user's animation at every redraw.

``bake_layer.bake_state`` hashes every key of the user's animation: about 0.1 s for 300 F-curves
of 2000 keys (mocap), 0.7 s for 800 of 5000, measured; a panel redraws on every hover and edit.
Here the answer is kept per object and reused while nothing it depends on can have changed: the
recorded digest, the animation's layout (``bake_layer.animation_layout``: active action, slot,
strips) and a generation that the handlers below advance whenever a depsgraph update touches an
Action (a key, handle, F-curve or modifier edit), after undo and redo, and when a file loads.
Operators and the command line keep calling ``bake_layer.bake_state`` itself.
"""
import bpy

from . import app_handlers, bake_layer

_generation = 0
_cache = {}   # object pointer -> (generation, recorded digest, layout, state)


def bake_state(obj):
    """As ``bake_layer.bake_state`` (None, "current" or "stale"), recomputed only after changes."""
    found = bake_layer.find_bake(obj)
    if found is None:
        return None
    recorded = bake_layer.recorded_digest(found)
    layout = bake_layer.animation_layout(obj)
    key = obj.as_pointer()
    hit = _cache.get(key)
    if hit is not None and hit[:3] == (_generation, recorded, layout):
        return hit[3]
    state = "current" if recorded == bake_layer.animation_digest(obj) else "stale"
    _cache[key] = (_generation, recorded, layout, state)
    return state


def _advance():
    global _generation
    _generation += 1
    _cache.clear()


@bpy.app.handlers.persistent
def _on_depsgraph_update(scene, depsgraph):
    for update in depsgraph.updates:
        if isinstance(update.id, bpy.types.Action):
            _advance()
            return


@bpy.app.handlers.persistent
def _on_change(*_args):
    _advance()


_HANDLERS = (
    ("depsgraph_update_post", _on_depsgraph_update),
    ("undo_post", _on_change),
    ("redo_post", _on_change),
    ("load_post", _on_change),
)


def register():
    app_handlers.add(_HANDLERS)


def unregister():
    app_handlers.remove(_HANDLERS)
    _advance()

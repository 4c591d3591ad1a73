"""Adding and removing our ``bpy.app.handlers`` from a table of (handler list name, function).

Both are idempotent: a function is appended once and every copy of it is removed (Blender 4.5
hangs at exit while a handler stays registered, so removal must be complete)."""
import bpy


def add(table):
    for attr, fn in table:
        handlers = getattr(bpy.app.handlers, attr)
        if fn not in handlers:
            handlers.append(fn)


def remove(table):
    for attr, fn in table:
        handlers = getattr(bpy.app.handlers, attr)
        while fn in handlers:
            handlers.remove(fn)

"""Blender-side tests run inside the real ``bpy`` module (the PyPI wheel)."""
import atexit
import pathlib
import sys

import pytest

bpy = pytest.importorskip("bpy")

ROOT = pathlib.Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import overlap_assist  # noqa: E402


@pytest.fixture(scope="session", autouse=True)
def registered_addon():
    overlap_assist.register()
    yield
    overlap_assist.unregister()


@pytest.fixture(autouse=True)
def empty_scene():
    bpy.ops.wm.read_factory_settings(use_empty=True)
    yield


def _leave_clean():
    # Blender 4.5 hangs at exit after a Python driver ran or with handlers left registered.
    bpy.app.driver_namespace.clear()
    bpy.ops.wm.read_factory_settings(use_empty=True)


atexit.register(_leave_clean)

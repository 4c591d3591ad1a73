"""Rows of the Body Motion panel for the spin check and the flight fix (drawing only)."""
import json

from ..core import readout
from . import flight_fix_layer, flight_jobs


def draw_flight_tools(layout, obj):
    """Check Spin / Fix Flight buttons with Fix Flight's stored choices, the last spin findings,
    the fix layer's influence (its strip's own value) and advice."""
    body = obj.overlap_assist.body
    row = layout.row(align=True)
    row.prop(body, "fix_mode", expand=True)
    layout.prop(body, "fix_blend_frames")
    row = layout.row(align=True)
    row.operator("overlap_assist.check_spin", icon='ORIENTATION_GIMBAL')
    row.operator("overlap_assist.fix_flight", icon='IPO_QUAD')
    raw = obj.get(flight_jobs.SPIN_PROPERTY)
    if raw:
        box = layout.box()
        for fl in json.loads(raw).get("flights", []):
            if fl["finding"]:
                box.label(text=readout.sentence(fl["finding"]), icon='ERROR')
            else:
                box.label(text=f"Spin kept in flight {fl['takeoff_frame']:.0f}-{fl['touchdown_frame']:.0f} "
                               f"(within {fl['threshold_deg_per_s']:.0f}°/s)", icon='CHECKMARK')
    if flight_fix_layer.has_fix(obj):
        box = layout.box()
        info = flight_fix_layer.fix_info(obj)
        box.label(text=f"{flight_fix_layer.FIX_TRACK_NAME} on '{info.get('bone', '')}' "
                       f"({'keep apex' if info.get('mode') == 'KEEP_APEX' else 'keep contacts'})", icon='NLA')
        box.prop(body, "fix_influence", slider=True)
        for fl in flight_jobs.fix_summary(obj).get("flights", []):
            box.label(text=readout.sentence(fl["advice"]))
        box.operator("overlap_assist.remove_flight_fix", icon='X')

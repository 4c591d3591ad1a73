"""Headless flight physics: the ``fix-flight`` command and the spin check in ``analyze --json``.

The command's parser and entry are in ``cli.py`` (which imports this module; this one never
imports ``cli``, so the module graph has no circle).
"""


def spin_json(obj, scene):
    """The spin check as JSON (a dict with ``flights``, or ``error`` when the rig lacks segments)."""
    from .blender import flight_jobs
    from .core.angular_momentum import spin_to_dict
    from .core.errors import OverlapAssistError
    try:
        _result, checks, _warnings = flight_jobs.run_spin_check(obj, scene)
    except OverlapAssistError as exc:
        return {"error": str(exc)}
    return {"flights": spin_to_dict(checks)}


def process_fix(obj, scene):
    """Batch worker step: the report's flight extras, then the fix layer written on ``obj``.

    Returns (report clip extras, summary text, whether a fix layer was written).
    """
    from .blender import flight_jobs
    from .core.errors import OverlapAssistError
    extras = flight_jobs.report_extras(obj, scene)
    try:
        stats, _fix, _result, _warnings = flight_jobs.apply_fix(obj, scene)
    except OverlapAssistError as exc:
        return extras, f"flight not fixed: {exc}", False
    return extras, stats.summary(), True

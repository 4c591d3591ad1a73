"""The operators' catch-all: no traceback ever reaches the user from an Overlap Assist button.

``@guarded`` on an operator class wraps its ``execute``, ``invoke`` and ``modal``: a domain error
(:class:`OverlapAssistError`) becomes its one clear line; anything unexpected becomes one line
that names the operator, says it is a bug to report, and puts the traceback in the Info log
(Info editor) instead of the console.
"""
import functools
import traceback

from ..core.errors import OverlapAssistError

BUG_HINT = "this is a bug in Overlap Assist: please report it with the details from the Info log"


def unexpected_line(label: str, exc: BaseException) -> str:
    first = (str(exc).strip().splitlines() or [""])[0]
    what = f"{type(exc).__name__}: {first}" if first else type(exc).__name__
    if len(what) > 160:
        what = what[:159] + "…"
    return f"{label} stopped on an unexpected problem ({what}); {BUG_HINT}"


def _report(op, context, method, exc):
    _clean_up(op, context, method)
    if isinstance(exc, OverlapAssistError):
        op.report({'ERROR'}, str(exc))
    else:
        label = getattr(type(op), "bl_label", type(op).__name__)
        op.report({'INFO'}, f"{label}: details of the unexpected problem\n{traceback.format_exc()}")
        op.report({'ERROR'}, unexpected_line(label, exc))
    return {'CANCELLED'}


def _wrap(fn, method):
    # Blender checks the number of arguments of an operator's methods: keep the exact signatures.
    if method == "execute":
        @functools.wraps(fn)
        def wrapper(self, context):
            try:
                return fn(self, context)
            except Exception as exc:  # noqa: BLE001 - the catch-all at the operator boundary
                return _report(self, context, method, exc)
    else:
        @functools.wraps(fn)
        def wrapper(self, context, event):
            try:
                return fn(self, context, event)
            except Exception as exc:  # noqa: BLE001 - the catch-all at the operator boundary
                return _report(self, context, method, exc)
    return wrapper


def _clean_up(op, context, method):
    """A modal operator that stops on an error releases what it holds (timer, progress)."""
    stop = getattr(op, "_stop", None)
    if method == "modal" and callable(stop):
        try:
            stop(context)
        except Exception:  # noqa: BLE001 - best effort; the error itself is reported
            pass


def guarded(cls):
    """Class decorator: the operator's entry points report errors instead of raising them."""
    for method in ("execute", "invoke", "modal"):
        fn = cls.__dict__.get(method)
        if fn is not None:
            setattr(cls, method, _wrap(fn, method))
    return cls

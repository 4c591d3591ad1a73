"""The progress bar and warning lines every long-running operator shows (one place for both)."""
import contextlib


@contextlib.contextmanager
def progress_bar(context):
    """Show the window manager's progress bar; yields ``update(fraction 0..1)``. Always ended."""
    wm = context.window_manager
    wm.progress_begin(0, 100)
    try:
        yield lambda f: wm.progress_update(int(100 * f))
    finally:
        wm.progress_end()


def report_warnings(op, warnings):
    for w in warnings:
        op.report({'WARNING'}, w)

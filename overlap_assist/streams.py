"""The headless commands' own output: stdout carries our results, stderr only our lines.

Blender writes its own log lines ("Read blend: ...", "Saved copy as ...", color management
notes) straight to the process's file descriptors 1 and 2 from C. While a command runs, both
descriptors point at a temporary log instead (``os.dup2`` at the OS level, so C output is caught
too); our results and our error lines go to copies of the original descriptors. The log is kept
for the details of an unexpected error. Unexpected errors become one line plus a hint to report
them; the traceback and the log go to a details file.
"""
import contextlib
import datetime
import os
import platform
import sys
import tempfile
import traceback

LOG_TAIL_BYTES = 20000
"""How much of Blender's own log an error's details file keeps (the end of it)."""


def _flush_c_stdio():
    """Flush C's stdio buffers so Blender's buffered lines land in the log, not after it."""
    try:
        import ctypes
        ctypes.CDLL(None).fflush(None)
    except (OSError, AttributeError, TypeError):  # not available on every platform
        pass


class Streams:
    """``out`` and ``err``: text writers on the original stdout and stderr; ``log``: Blender's lines."""

    def __init__(self, out, err, log):
        self.out, self.err, self._log = out, err, log

    def log_tail(self) -> str:
        _flush_c_stdio()
        sys.stdout.flush()
        sys.stderr.flush()
        try:
            size = self._log.seek(0, os.SEEK_END)
            self._log.seek(max(0, size - LOG_TAIL_BYTES))
            return self._log.read().decode("utf-8", "replace")
        except (OSError, ValueError):
            return ""


@contextlib.contextmanager
def captured(restore=True):
    """Point fd 1 and 2 at a temporary log for the duration; yield :class:`Streams`.

    ``restore=False`` leaves fd 1 and 2 on the null device afterwards (for a process that is about
    to exit: Blender may still print while it shuts down).
    """
    _flush_c_stdio()
    sys.stdout.flush()
    sys.stderr.flush()
    saved_out, saved_err = os.dup(1), os.dup(2)
    log = tempfile.TemporaryFile()
    os.dup2(log.fileno(), 1)
    os.dup2(log.fileno(), 2)
    out = os.fdopen(os.dup(saved_out), "w", encoding="utf-8", errors="replace")
    err = os.fdopen(os.dup(saved_err), "w", encoding="utf-8", errors="replace")
    try:
        yield Streams(out, err, log)
    finally:
        for w in (out, err):
            try:
                w.flush()
            except OSError:
                pass
        _flush_c_stdio()
        sys.stdout.flush()
        sys.stderr.flush()
        if restore:
            os.dup2(saved_out, 1)
            os.dup2(saved_err, 2)
        else:
            null = os.open(os.devnull, os.O_WRONLY)
            os.dup2(null, 1)
            os.dup2(null, 2)
            os.close(null)
        for fd in (saved_out, saved_err):
            os.close(fd)
        for w in (out, err):
            try:
                w.close()
            except OSError:
                pass
        log.close()


def short_text(exc: BaseException, limit: int = 200) -> str:
    """'ValueError: first line of the message' (shortened), for a one-line report."""
    lines = str(exc).strip().splitlines()
    first = lines[0] if lines else ""
    text = f"{type(exc).__name__}: {first}" if first else type(exc).__name__
    return text if len(text) <= limit else text[:limit - 1] + "…"


def details_text(exc: BaseException, argv=None, log: str = "") -> str:
    """What a bug report needs: the command, versions, the traceback and Blender's log lines."""
    bpy = sys.modules.get("bpy")
    blender = getattr(getattr(bpy, "app", None), "version_string", "not loaded") if bpy else "not loaded"
    parts = [f"when: {datetime.datetime.now(datetime.timezone.utc).isoformat(timespec='seconds')}",
             f"command: {' '.join(argv) if argv is not None else ' '.join(sys.argv)}",
             f"python: {platform.python_version()}  blender: {blender}  platform: {platform.platform()}",
             "", "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))]
    if log:
        parts += ["Blender's log (end):", log]
    return "\n".join(parts)


def write_details(text: str, path=None) -> str:
    """Write an error's details to ``path`` (or a new file in the temporary folder); returns the path."""
    if path is None:
        stamp = datetime.datetime.now().strftime("%Y%m%d-%H%M%S")
        fd, path = tempfile.mkstemp(prefix=f"overlap_assist-error-{stamp}-", suffix=".txt")
        os.close(fd)
    with open(path, "w", encoding="utf-8") as f:
        f.write(text)
    return path

"""Where the headless commands may write, checked before any work (no bpy here).

Every problem raises :class:`OutputError` with one line saying what to do. Outputs are written
atomically (a temporary file in the same folder, then a rename), keep the permissions of the file
they replace, and a .blend output is compressed like its input.
"""
import os
import stat

BLEND_MAGIC_PLAIN = b"BLENDER"
GZIP_MAGIC = b"\x1f\x8b"
ZSTD_MAGIC = b"\x28\xb5\x2f\xfd"
"""File signatures: Blender's uncompressed header, gzip (Blender < 3.0) and Zstandard (RFC 8878, sec. 3.1.1)."""


class OutputError(Exception):
    """An input cannot be read or an output cannot be written where asked; the message says what to do."""


def blend_compression(path) -> str:
    """'zstd', 'gzip', 'none' (a plain .blend) or 'unknown', from the file's first bytes."""
    try:
        with open(path, "rb") as f:
            head = f.read(8)
    except OSError:
        return "unknown"
    if head.startswith(ZSTD_MAGIC):
        return "zstd"
    if head.startswith(GZIP_MAGIC):
        return "gzip"
    if head.startswith(BLEND_MAGIC_PLAIN):
        return "none"
    return "unknown"


def is_compressed(path) -> bool:
    return blend_compression(path) in ("zstd", "gzip")


def _writable(path) -> bool:
    """Write permission, also for a super-user: a file or folder without any write bit counts as read-only."""
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return False
    return os.access(path, os.W_OK) and bool(mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH))


def same_file(a, b) -> bool:
    a, b = os.path.realpath(a), os.path.realpath(b)
    if a == b:
        return True
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def check_input_file(path, what="input"):
    """Refuse an input that is missing, a folder or unreadable."""
    if os.path.isdir(path):
        raise OutputError(f"{path} is a folder, not a .blend file: give the file (or a pattern such as "
                          f"{os.path.join(path, '*.blend')} for batch)")
    if not os.path.exists(path):
        raise OutputError(f"no such file: {path}")
    if not os.access(path, os.R_OK):
        raise OutputError(f"cannot read {path}: no read permission")


def check_folder_writable(folder, flag="--out"):
    if not os.path.exists(folder):
        raise OutputError(f"output folder does not exist: {folder}")
    if not os.path.isdir(folder):
        raise OutputError(f"{flag}: {folder} is a file, not a folder")
    if not _writable(folder):
        raise OutputError(f"cannot write into {folder} (read-only folder): choose another {flag}")


def in_place_target(path) -> str:
    """The real file an ``--in-place`` write replaces (symlinks followed); refuses a read-only file."""
    check_input_file(path)
    real = os.path.realpath(path)
    if not _writable(real):
        raise OutputError(f"{path} is read-only: make it writable first, or save the result elsewhere with --out")
    check_folder_writable(os.path.dirname(real), "--in-place")
    return real


def out_file_target(out, inputs=()) -> str:
    """The file ``--out`` names, checked: not a folder, not an input, in a writable folder."""
    if out.endswith(os.sep) or os.path.isdir(out):
        raise OutputError(f"--out {out} is a folder: give a file name such as {os.path.join(out, 'baked.blend')}")
    target = os.path.abspath(out)
    for inp in inputs:
        if os.path.exists(inp) and same_file(inp, target):
            raise OutputError("--out is the input file: pass --in-place (without --out) to overwrite it on purpose")
    check_folder_writable(os.path.dirname(target))
    if os.path.lexists(target):
        if os.path.islink(target):
            target = os.path.realpath(target)
        if os.path.exists(target) and not _writable(target):
            raise OutputError(f"{out} exists and is read-only: choose another --out")
    return target


def out_folder_target(folder) -> str:
    """The batch output folder: created if missing; refuses a file or a read-only folder."""
    folder = os.path.abspath(folder)
    if os.path.exists(folder) and not os.path.isdir(folder):
        raise OutputError(f"--out {folder} is a file, not a folder: give a folder for the batch outputs")
    if not os.path.exists(folder):
        parent = os.path.dirname(folder)
        while parent and not os.path.exists(parent):
            parent = os.path.dirname(parent)
        if parent and (not os.path.isdir(parent) or not _writable(parent)):
            raise OutputError(f"cannot create the output folder {folder} ({parent} is read-only or not a folder)")
        try:
            os.makedirs(folder, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create the output folder {folder}: {exc.strerror}") from None
    check_folder_writable(folder)
    return folder


def temporary_beside(path, suffix="") -> str:
    """A temporary name in ``path``'s folder (hidden, with the process id), for an atomic replace."""
    folder, base = os.path.split(path)
    return os.path.join(folder, f".{base}.tmp{os.getpid()}{suffix}")


def replace_keeping_mode(tmp, path):
    """Move ``tmp`` over ``path``; an existing file's permission bits are kept."""
    try:
        mode = stat.S_IMODE(os.stat(path).st_mode)
    except OSError:
        mode = None
    if mode is not None:
        os.chmod(tmp, mode)
    os.replace(tmp, path)


def write_text_atomic(path, text):
    """Write ``text`` to ``path`` through a temporary file and a rename (no half-written outputs)."""
    tmp = temporary_beside(path)
    try:
        with open(tmp, "w", encoding="utf-8") as f:
            f.write(text)
        replace_keeping_mode(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)

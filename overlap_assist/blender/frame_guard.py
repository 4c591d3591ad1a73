"""One flag: the add-on itself is stepping through frames, so frame-change reactions stand down.

Sampling the animated pose, solving key bones and the live preview's own re-evaluations set
frames; the preview's handlers must not pose bones meanwhile. Those that set frames hold the
guard (:func:`held`); the handlers check :func:`is_held`. A module of its own so that sampling
(``chain_sim``) and the preview (``preview``) need not import each other.
"""
import contextlib

_depth = 0


def is_held() -> bool:
    return _depth > 0


@contextlib.contextmanager
def held():
    """Hold the guard while the body runs (nests; released on errors too)."""
    global _depth
    _depth += 1
    try:
        yield
    finally:
        _depth -= 1

"""The airborne intervals the flight checks work on, taken from a BodyAnalysis.

The spin check and the flight fix need only when each flight starts and ends and whether it is a
jump (the body pushed off) or a drop (it stepped off a ledge); how flights are detected is the
analysis stage's business. ``flight_windows`` is the one place that reads them, so a better
detector changes nothing downstream.
"""
from __future__ import annotations

from dataclasses import dataclass

from .errors import InputError

KINDS = ("jump", "drop")


@dataclass(frozen=True)
class FlightWindow:
    """One airborne interval on the analysis clock (seconds from the first sample)."""
    takeoff_s: float
    touchdown_s: float
    kind: str = "jump"
    """'jump' (pushed off) or 'drop' (stepped off: no rise before the fall)."""

    def __post_init__(self):
        if not self.touchdown_s > self.takeoff_s:
            raise InputError(f"a flight must end after it starts (takeoff {self.takeoff_s} s, "
                             f"touchdown {self.touchdown_s} s)")
        if self.kind not in KINDS:
            raise InputError(f"flight kind must be one of {KINDS}, got {self.kind!r}")

    @property
    def duration_s(self) -> float:
        return self.touchdown_s - self.takeoff_s


def flight_windows(analysis) -> tuple:
    """FlightWindow of every flight in ``analysis`` (a :class:`BodyAnalysis`).

    Reads ``takeoff_frame``, ``touchdown_frame`` and, when the analysis provides it, ``kind``
    (flights without one are jumps).
    """
    frame0, fps = float(analysis.frames[0]), float(analysis.fps)
    out = []
    for fl in analysis.flights:
        kind = getattr(fl, "kind", "jump") or "jump"
        out.append(FlightWindow((fl.takeoff_frame - frame0) / fps, (fl.touchdown_frame - frame0) / fps,
                                kind if kind in KINDS else "jump"))
    return tuple(out)

"""Domain errors. The Blender layer and the CLI turn these into one clear line for the user."""


class OverlapAssistError(Exception):
    """Base class: a problem the user can fix; the message says what to do."""


class InputError(OverlapAssistError):
    """Bad input data (too few samples, NaNs, wrong shapes, settings out of range)."""


class RangeTooShortError(InputError):
    """The frame range is too short for the chosen smoothing window."""


class InvalidChainError(OverlapAssistError):
    """A chain cannot be simulated (no links, zero-length bone, missing bone)."""

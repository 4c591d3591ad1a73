"""Chain presets: small JSON files of our own schema.

    {"schema": "overlap_assist.chain_preset", "version": 1, "name": "Ponytail",
     "note": "...", "settings": {"frequency_hz": 1.2, "damping_ratio": 0.2, ...}}

``settings`` holds physical values (fps-independent); the UI derives Lag/Settle/Bounce from
them at the scene's frame rate. Unknown setting names are refused so a typo is not ignored.
"""
from __future__ import annotations

import json
import math
import os
import pathlib

from .errors import InputError

SCHEMA = "overlap_assist.chain_preset"
VERSION = 1
SHIPPED_DIR = pathlib.Path(__file__).resolve().parent.parent / "presets"

# name -> (minimum, maximum): the ranges the UI offers.
SETTING_RANGES = {
    "frequency_hz": (0.0, 10.0),
    "damping_ratio": (0.0, 2.0),
    "tip_looseness": (0.0, 1.0),
    "gravity_scale": (0.0, 3.0),
    "body_response": (0.0, 3.0),
    "air_drag": (0.0, 10.0),
    "bend_limit_deg": (5.0, 180.0),
    "collision_radius_m": (0.0, 1.0),
    "substeps": (1, 16),
    "thickness_taper": (0.0, 0.95),
    "tip_mass_ratio": (0.0, 20.0),
}


def validate_settings(settings: dict, where: str = "preset") -> dict:
    if not isinstance(settings, dict) or not settings:
        raise InputError(f"{where}: 'settings' must be an object with at least one value")
    out = {}
    for key, value in settings.items():
        if key not in SETTING_RANGES:
            raise InputError(f"{where}: unknown setting '{key}' (known: {', '.join(sorted(SETTING_RANGES))})")
        lo, hi = SETTING_RANGES[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise InputError(f"{where}: '{key}' must be a number")
        if not lo <= value <= hi:
            raise InputError(f"{where}: '{key}' = {value} is outside {lo}–{hi}")
        out[key] = int(value) if key == "substeps" else float(value)
    return out


def parse_preset(text: str, where: str = "preset") -> dict:
    """Validated preset document from JSON text."""
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{where} is not valid JSON ({exc.msg}, line {exc.lineno})") from None
    if not isinstance(doc, dict) or doc.get("schema") != SCHEMA:
        raise InputError(f"{where} is not an Overlap Assist chain preset (schema must be '{SCHEMA}')")
    if doc.get("version") != VERSION:
        raise InputError(f"{where}: preset version {doc.get('version')!r} is not supported (expected {VERSION})")
    name = doc.get("name")
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"{where}: a preset needs a 'name'")
    return {"name": name.strip(), "note": str(doc.get("note", "")), "settings": validate_settings(doc.get("settings"), where)}


def load_preset_file(path) -> dict:
    try:
        text = pathlib.Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot read preset file {path} ({exc.strerror})") from None
    return parse_preset(text, str(path))


def shipped_presets() -> dict:
    """Key (file stem) -> preset document, for the presets shipped in the package."""
    return {p.stem: load_preset_file(p) for p in sorted(SHIPPED_DIR.glob("*.json"))}


def preset_by_name(name: str, user_dir=None) -> dict:
    """Find a preset by file stem or display name (case-insensitive), user presets first."""
    wanted = name.strip().lower().replace(" ", "_")
    dirs = [pathlib.Path(user_dir)] if user_dir else []
    for d in dirs + [SHIPPED_DIR]:
        for p in sorted(d.glob("*.json")) if d.is_dir() else []:
            doc = load_preset_file(p)
            if wanted in (p.stem.lower(), doc["name"].lower().replace(" ", "_")):
                return doc
    known = ", ".join(shipped_presets())
    raise InputError(f"no preset named '{name}' (shipped: {known})")


def preset_text(name: str, settings: dict, note: str = "") -> str:
    doc = {"schema": SCHEMA, "version": VERSION, "name": name, "note": note,
           "settings": validate_settings(settings, name)}
    return json.dumps(doc, indent=2) + "\n"


def save_preset(directory, name: str, settings: dict, note: str = "") -> pathlib.Path:
    """Write a user preset atomically; returns its path."""
    stem = "".join(c if c.isalnum() else "_" for c in name.strip().lower()).strip("_")
    if not stem:
        raise InputError("give the preset a name with at least one letter or digit")
    directory = pathlib.Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    path = directory / f"{stem}.json"
    tmp = path.with_suffix(f".tmp{os.getpid()}")
    tmp.write_text(preset_text(name, settings, note), encoding="utf-8")
    os.replace(tmp, path)
    return path

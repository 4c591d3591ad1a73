"""Shipped presets are valid, within the UI ranges, and round-trip; bad files are refused clearly."""
import json

import pytest

from overlap_assist.core.errors import InputError
from overlap_assist.core.presets import SETTING_RANGES, parse_preset, preset_by_name, save_preset, shipped_presets

REQUIRED = {"long_hair", "short_hair", "ponytail", "braid", "heavy_tail", "light_tail", "cape_strip",
            "scarf_end", "ear", "antenna", "strap", "hanging_prop", "soft_mass"}


def test_all_required_presets_ship_and_say_they_are_common_practice():
    shipped = shipped_presets()
    assert REQUIRED <= set(shipped)
    for doc in shipped.values():
        assert "common practice" in doc["note"]
        for key, value in doc["settings"].items():
            lo, hi = SETTING_RANGES[key]
            assert lo <= value <= hi


def test_lookup_by_display_name_and_round_trip(tmp_path):
    assert preset_by_name("Scarf end")["name"] == "Scarf end"
    path = save_preset(tmp_path, "My Tail!", {"frequency_hz": 1.7, "damping_ratio": 0.5})
    assert path.name == "my_tail.json"
    assert preset_by_name("my tail", user_dir=tmp_path)["settings"] == {"frequency_hz": 1.7, "damping_ratio": 0.5}


@pytest.mark.parametrize("text,msg", [
    ("{", "not valid JSON"),
    (json.dumps({"schema": "other"}), "not an Overlap Assist chain preset"),
    (json.dumps({"schema": "overlap_assist.chain_preset", "version": 1, "name": "x", "settings": {"stiffnes": 1}}),
     "unknown setting 'stiffnes'"),
    (json.dumps({"schema": "overlap_assist.chain_preset", "version": 1, "name": "x",
                 "settings": {"damping_ratio": 9}}), "outside"),
    (json.dumps({"schema": "overlap_assist.chain_preset", "version": 2, "name": "x", "settings": {}}), "version"),
])
def test_bad_presets_are_refused_with_a_reason(text, msg):
    with pytest.raises(InputError, match=msg):
        parse_preset(text)


def test_unknown_preset_lists_the_shipped_ones():
    with pytest.raises(InputError, match="ponytail"):
        preset_by_name("no such thing")

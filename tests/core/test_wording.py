"""Words the user reads: US spelling, no internal field names in errors, one rounding everywhere,
a README that lists every command and output file (no Blender needed)."""
import ast
import dataclasses
import math
import pathlib
import re

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from overlap_assist import batch, cli
from overlap_assist.core import body_types, chain_types, readout
from overlap_assist.core.chain_types import ChainInput, ChainState
from overlap_assist.core.errors import InputError
from overlap_assist.core.flight_check import verdict_for
from overlap_assist.report.findings import landing_finding, verdict_text

ROOT = pathlib.Path(__file__).resolve().parents[2]
PACKAGE = ROOT / "overlap_assist"


def _user_strings():
    """(file, line, text) of every string constant in the package that is not a docstring."""
    for path in sorted(PACKAGE.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        # A bare string statement is a docstring (of a module, class, function or attribute).
        docstrings = {id(node.value) for node in ast.walk(tree)
                      if isinstance(node, ast.Expr) and isinstance(node.value, ast.Constant)}
        for node in ast.walk(tree):
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings:
                yield path.relative_to(ROOT), node.lineno, node.value


def test_one_spelling_us_english():
    # Before: "Analyse blocked keys as splines", "Centre of mass", "(metres)" beside "Analyze Body Motion".
    british = re.compile(r"\b([Aa]nalys(e|ed|es|ing)|[Cc]entres?|[Cc]entred|[Mm]etres?|[Cc]olours?|[Hh]onoured)\b")
    found = [f"{p}:{n}: {t!r}" for p, n, t in _user_strings() if british.search(t)]
    assert not found, "\n".join(found)


def _field_names():
    names = set()
    for mod in (chain_types, body_types):
        for v in vars(mod).values():
            if isinstance(v, type) and dataclasses.is_dataclass(v):
                names |= {f.name for f in dataclasses.fields(v) if "_" in f.name}
    return names


def test_error_messages_never_quote_internal_field_names():
    # Before: "pivot_pos_m must have shape ...", "target_dirs must be unit vectors", "dirs contains NaN".
    names = _field_names() | {"sim_dirs", "target_rot_wxyz"}
    assert {"pivot_pos_m", "target_dirs"} <= names
    pattern = re.compile(r"\b(" + "|".join(map(re.escape, sorted(names))) + r")\b")
    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not (isinstance(node, ast.Raise) and node.exc is not None):
                continue
            labelled = {id(a) for c in ast.walk(node.exc) if isinstance(c, ast.Call)
                        and getattr(c.func, "id", "") == "_label" for a in c.args}
            for c in ast.walk(node.exc):
                if isinstance(c, ast.Constant) and isinstance(c.value, str) and id(c) not in labelled \
                        and pattern.search(c.value):
                    found.append(f"{path.relative_to(ROOT)}:{node.lineno}: {c.value!r}")
    assert not found, "\n".join(found)


@pytest.mark.parametrize("make", [
    lambda: ChainInput(np.zeros((1, 3)), np.zeros((1, 1, 3)), np.ones(1)),
    lambda: ChainInput(np.zeros((3, 3)), np.zeros((2, 1, 3)), np.ones(1)),
    lambda: ChainInput(np.zeros((3, 3)), np.zeros((3, 1, 3)), np.ones(1)),
    lambda: ChainInput(np.full((3, 3), np.nan), np.zeros((3, 1, 3)), np.ones(1)),
    lambda: ChainState(np.full((2, 3), np.nan), np.zeros((2, 3))),
])
def test_the_messages_raised_read_in_the_ui_words(make):
    with pytest.raises(InputError) as info:
        make()
    text = str(info.value)
    assert not re.search(r"\b(pivot_pos_m|target_dirs|lengths_m|dirs|dir_rates_per_s)\b", text), text
    assert "chain" in text


def test_nan_in_a_simulated_chain_says_what_to_do():
    # Before: "dirs contains NaN or infinite values" (chains of ~15+ bones on a jumping body).
    with pytest.raises(InputError, match="simulation became unstable.*lower Body response"):
        ChainState(np.full((2, 3), np.nan), np.zeros((2, 3)))


@settings(max_examples=200, deadline=None)
@given(st.floats(0.01, 3.0, allow_nan=False))
def test_one_rounding_for_the_gravity_ratio(ratio):
    # Before: the CLI said "floaty: 0.5 g" and the report "floaty: 0.45 g" for the same flight.
    core = verdict_for(ratio)
    report = verdict_text({"verdict": core, "gravity_ratio": ratio})
    assert core == report
    assert core.endswith(readout.ratio_g(ratio))


def test_one_rounding_for_the_landing_load():
    assert "peak load 5.0 g" in landing_finding({"frame": 41.6, "peak_load_g": 4.96, "peak_frame": 42.25,
                                                  "decel_frames": 3})
    assert readout.fixed(-0.004, 2) == "0.00" and readout.fixed(math.nan, 1) == "—"
    assert readout.frame(26.94) == "26.9" and readout.load_g(4.96) == "5.0 g" and readout.ratio_g(0.449) == "0.45 g"


def _headless_section():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    start = text.index("## Headless")
    end = text.index("\n## ", start + 1)
    return text[start:end]


def test_readme_lists_every_command_and_output_file():
    # Before: `process` and most output files were not in the README.
    section = _headless_section()
    sub = next(a for a in cli.build_parser()._actions if a.dest == "command")
    for command in sub.choices:
        assert f"overlap_assist {command}" in section, command
    for suffix in batch.OUTPUT_SUFFIXES:
        assert f"<stem>{suffix}" in section, suffix
    for name in ("batch_log.json", "overlap_demo.blend", "overlap_demo.json", "overlap_report.html",
                 "contact_sheet.png", "strip_<clip>.png", "<stem>.<armature>.analysis.json"):
        assert name in section, name
    for flag in ("--scene", "--armature", "--in-place", "--jobs", "--tolerance-deg"):
        assert flag in section, flag


def test_counts_and_sentences_read_as_english():
    # US English (the brief): "1 chain", not "1 chains"; a phrase on its own line starts capitalized.
    assert readout.count(1, "chain") == "1 chain" and readout.count(4, "chain") == "4 chains"
    assert readout.count(0, "chain") == "0 chains"
    assert readout.sentence("the body starts turning") == "The body starts turning"
    assert readout.sentence("") == "" and readout.sentence(None) == ""

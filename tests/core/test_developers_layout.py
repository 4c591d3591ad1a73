"""DEVELOPERS.md's layout names every module of the package, so the next engineer finds each one
described (it fails when a module is added without a line there)."""
import pathlib

ROOT = pathlib.Path(__file__).resolve().parents[2]


def layout_block():
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    start = text.index("## Layout")
    fence = text.index("```", start)
    return text[fence + 3:text.index("```", fence + 3)]


def test_every_module_has_a_line_in_the_layout():
    block = layout_block()
    modules = sorted(p.relative_to(ROOT / "overlap_assist") for p in (ROOT / "overlap_assist").rglob("*.py")
                     if p.name != "__init__.py")
    assert len(modules) > 40   # the package was found
    missing = [str(m) for m in modules if m.name not in block]
    assert not missing, f"add these modules to the layout in DEVELOPERS.md: {missing}"

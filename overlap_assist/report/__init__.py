"""Self-contained HTML reports of analysed clips (inline SVG plots, no network, no Blender).

``build_report(clips)`` returns the document as text; ``write_report(path, clips)`` writes it
atomically. A clip is a dict holding the JSON form of a body analysis
(:func:`overlap_assist.core.body_analysis.analysis_to_dict`) plus optional body height, chain
swing and image entries; see :mod:`.html_report`.
"""
from .html_report import CAUTION, build_report, write_report

__all__ = ["CAUTION", "build_report", "write_report"]

"""HTML reports: one self-contained page per reach and an index page for the run.

Imported only when a report is written (it pulls in matplotlib).
"""
from .facts import events_table, flagged_sections, markers, roughness_table, run_facts, section_facts
from .index import RunPage, write_index
from .mapview import MapLayers
from .page import ReachContext, render_report, write_report
from .tables import event_summary

__all__ = ["MapLayers", "ReachContext", "RunPage", "event_summary", "events_table", "flagged_sections", "markers",
           "render_report", "roughness_table", "run_facts", "section_facts", "write_index", "write_report"]

"""HTML reports: one self-contained page per reach with embedded figures."""
from .page import event_summary, render_report, write_report

__all__ = ["event_summary", "render_report", "write_report"]

"""Self-contained HTML reports (Jinja2 templates shipped as package data)."""

from .report import (check_report_path, render_job, render_unit, write_report)

__all__ = ["check_report_path", "render_job", "render_unit", "write_report"]

"""Stage 8, report: the whole job on a scenario, written as a Markdown report with figures.

May import: every stage before it (model ... planning) and the shared helpers.
"""

from marketsim.report.full_report import write_full_report
from marketsim.report.markdown import Report

__all__ = ["Report", "write_full_report"]

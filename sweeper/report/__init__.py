"""The static HTML summary of a study and its flat export.

collect (study -> flat tables) -> importance, gradients, ranking (numbers) -> figures_* (plotly
figures) -> sections_* (HTML) -> render (the page). export writes the same tables as files.
"""

from sweeper.report.export import export_study
from sweeper.report.render import build_report

__all__ = ["build_report", "export_study"]

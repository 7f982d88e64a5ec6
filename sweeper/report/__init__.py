"""The static HTML summary of a study and its flat export.

collect (study -> flat tables) -> importance, gradient_findings, ranking (numbers) ->
figures_* (plotly figures) -> sections_* (HTML) -> render (the page). export writes the same
tables as files.
"""

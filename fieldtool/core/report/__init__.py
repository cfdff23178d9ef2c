"""Repair reports: a board's sessions against the expected readings, as Markdown or HTML."""

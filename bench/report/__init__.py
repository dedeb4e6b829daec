"""Run reports: the report's data, its figures and the HTML page."""

"""Run reports: `data` (what the report shows), `build` (reading a run, writing the report),
the figures (`figure_style`, `signal_data`, `signal_figure`, `estimate_figures`,
`timeline_figure`) and `html` (the page)."""

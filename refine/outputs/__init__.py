"""Hand-over: Touchstone, layout files, plots, the report, and the folder they go to."""

"""The report: figures and the self-contained HTML page."""

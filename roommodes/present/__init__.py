"""Presentation: plots (matplotlib, imported on first use), the HTML report, lengths in the
user's units."""

"""Plotly figures of the dashboard pages."""

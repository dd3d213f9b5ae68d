"""Rendering results: rich tables, plots, JSON/CSV and self-contained HTML reports."""

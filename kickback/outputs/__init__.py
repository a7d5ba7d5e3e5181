"""Outputs: text tables, JSON, CSV, figures; files are written atomically."""

"""Presentation: how figures are phrased and drawn (text filters, SVG charts), tables, CSV and
Parquet built from the services' typed answers."""

"""Presentation: how figures are phrased and drawn (text filters, SVG charts, CSV)."""

"""Presentation: tables, CSV and Parquet built from the services' typed answers."""

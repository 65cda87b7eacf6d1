"""Sensor readings: model, QC, ingest, queries, CSV and router."""

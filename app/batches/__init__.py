"""Larval batches and their exposure to low saturation."""

"""Kiln entry points (thin: parse config, call library code)."""

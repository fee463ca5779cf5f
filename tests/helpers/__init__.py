"""Shared test helpers: independent references and hand-built traces (one place)."""

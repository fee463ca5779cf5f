"""Neutral ground every stage stands on: the one error root, parameters declared as data,
the one registry, the package version. Imports nothing else of stopwise."""

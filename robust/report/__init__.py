"""Formatting of results: text tables, JSON, and (later) dossier files."""

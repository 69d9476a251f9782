"""Renderers: the report dictionary as terminal text, JSON and appendix files."""

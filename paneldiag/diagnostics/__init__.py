"""Diagnostics: pure functions of summaries, each returning a small result object."""

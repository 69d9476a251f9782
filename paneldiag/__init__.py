"""paneldiag: screen multi-wave panel data before fitting longitudinal models."""

__version__ = "0.1.0"
SCHEMA_VERSION = "2.1"  # 2.1: panel.times of dates in their own unit; attrition.entry, retention from entry

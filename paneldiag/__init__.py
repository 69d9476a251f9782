"""paneldiag: screen multi-wave panel data before fitting longitudinal models.

    import paneldiag
    report = paneldiag.screen(frame, id="household", wave="year", value="trust")

(docs/python.md). The API is loaded on first use, so that the command's error paths do
not pay for it.
"""

__version__ = "0.1.0"
SCHEMA_VERSION = "2.2"  # 2.2: --weight weights every estimate; wave_profile has no weighted_mean/sd;  2.1: panel.times of dates in their own unit; attrition.entry, retention from entry

__all__ = ["screen", "Report", "InputProblem", "__version__"]


def __getattr__(name: str):
    if name in ("screen", "Report"):
        from paneldiag import api
        return getattr(api, name)
    if name == "InputProblem":
        from paneldiag.errors import InputProblem
        return InputProblem
    raise AttributeError(f"module 'paneldiag' has no attribute {name!r}")

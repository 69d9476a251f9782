"""Words for the intake: how the waves were read, their order and times, the time unit and
any grouping of times into waves. Shared by the terminal, the appendix and its
reproducibility record (plain strings from the report's ``panel`` and ``ledger``)."""

from __future__ import annotations


def time_unit(report: dict) -> str:
    """The unit of the wave times: the panel's own if it names one, 'year' when every
    wave time is a calendar year (reports written before the panel named its unit), else
    'time unit'."""
    panel = report.get("panel", {})
    if panel.get("time_unit"):
        return str(panel["time_unit"])
    times = [t for t in panel.get("times") or [] if t is not None]
    if times and all(1800 <= t <= 2200 for t in times):
        return "year"
    return "time unit"


def _number(value) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return f"{value:.6g}" if isinstance(value, float) else str(value)


def time_basis(panel: dict) -> str:
    """How the waves were read and what their times count, e.g. 'dates written
    DD/MM/YYYY; times in days from 2015-11-03'."""
    reading = panel.get("wave_reading") or {}
    kind, unit = reading.get("read_as"), panel.get("time_unit")
    read = {"dates": f"dates written {reading.get('form')}", "numbers": "numbers",
            "text": "text labels in order", "columns": "wave columns in order"}.get(kind)
    if reading.get("times"):
        times = f"times {reading['times']}"
    elif unit:
        start = reading.get("times_from")
        times = f"times in {unit}s" + (f" from {start}" if start else "")
    elif kind in ("text", "columns"):
        times = "times 1 to T"
    else:
        times = "times as written (their unit is not named)"
    return "; ".join(t for t in (read, times) if t)


SHOWN_WAVES = 12   # more waves than this are shown as their first and last few


def wave_times(panel: dict) -> str:
    """Each wave in order with its time: '2015-11-03 (0), 2016-10-28 (360), ...'; with
    more than ``SHOWN_WAVES`` waves, the first eight and the last three around a count."""
    waves, times = panel.get("waves") or [], panel.get("times") or []
    shown = [w if str(w) == _number(t) else f"{w} ({_number(t)})"
             for w, t in zip(waves, times)]
    if len(shown) > SHOWN_WAVES:
        shown = shown[:8] + [f"... {len(shown) - 11} more ..."] + shown[-3:]
    return ", ".join(shown)


def wave_span(panel: dict) -> str:
    """The first and last wave with the time unit: '2015-01-01 to 2023-01-01, in years'."""
    waves = panel.get("waves") or []
    if not waves:
        return ""
    unit = panel.get("time_unit")
    return f"{waves[0]} to {waves[-1]}" + (f", times in {unit}s" if unit else "")


def grouping(ledger: dict) -> str | None:
    """What --wave-bins or --wave-round did to the rows, or None."""
    record = ledger.get("wave_grouping")
    if not record:
        return None
    return (f"{record['rule']}: {record['rows_moved']:,} row(s) took a new time, "
            f"{record['rows_outside']:,} fell outside the bins, "
            f"{record['rows_sharing_a_wave']:,} joined a wave already holding a row of their "
            "unit (handled by --duplicates)")


def distance(value, panel: dict) -> str:
    """A time distance with its unit when the panel names one: '1 year', '3 months'."""
    unit = (panel or {}).get("time_unit")
    text = f"{value:g}"
    return f"{text} {unit}{'' if value == 1 else 's'}" if unit else text


def table_read(info: dict) -> str | None:
    """Which table of a file holding several was read: "sheet 'panel' of 2", or
    "data frame 'tenants'"; None for files that hold one table."""
    if info.get("sheet") is not None:
        sheets = info.get("sheets") or [info["sheet"]]
        if len(sheets) == 1:
            return f"sheet '{info['sheet']}'"
        if "sheet" in (info.get("options") or {}):
            return f"sheet '{info['sheet']}' of {len(sheets)}"
        return f"sheet '{info['sheet']}' (the first of {len(sheets)}; another with --sheet)"
    if info.get("r_object") is not None:
        return f"data frame '{info['r_object']}'"
    return None

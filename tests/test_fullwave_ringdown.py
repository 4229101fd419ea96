"""How early a filter's field solve may stop when its ring-down is continued, read from the
fixture benchmarks/em_ringdown.py writes (one long record per filter, cut early, turned into
S-parameters as recorded and continued, compared with the whole record continued).

What the fixture shows, pinned here: continued, a record cut after one group delay gives the
whole record's centre, 3 dB bandwidth, worst in-band return loss and midband loss; the record
as cut does not. The field check's ringing (refine.fullwave.verify.CONTINUED_RING_DELAYS) must
lie where every studied filter's continued figures have settled.
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA

from refine.fullwave import ringdown, verify

DOC = json.loads((DATA / "fullwave-ringdown.json").read_text())
RUNS = {r["filter"]: r for r in DOC["runs"]}


def _changes(r: dict, cut: dict, kind: str) -> dict:
    """A cut's figures against the whole record continued: centre in units of the filter's
    bandwidth (f0 * FBW), bandwidth as a ratio less one, return loss and loss in dB."""
    ref, x = r["reference"], cut[kind]
    return {
        "centre": (x["centre_hz"] - ref["centre_hz"]) / (r["fbw"] * r["f0_hz"]),
        "bandwidth": x["bandwidth_hz"] / ref["bandwidth_hz"] - 1,
        "rl": x["worst_return_loss_db"] - ref["worst_return_loss_db"],
        "loss": x["midband_loss_db"] - ref["midband_loss_db"],
    }


def test_the_fixture_carries_its_provenance():
    assert "ms-alumina-tap-10g-n3-8pct" in RUNS
    for r in DOC["runs"]:
        assert r["engine"].startswith("openEMS") and r["date"] and r["cells"] > 10_000
        assert r["open_walls"] == "pml" and r["half_box"]
        assert r["record_group_delays"] >= 8  # long enough to settle the reference
        assert [c["group_delays"] for c in r["cuts"]][:3] == [1.0, 1.5, 2.0]


@pytest.mark.parametrize("name", sorted(RUNS))
def test_a_continued_cut_matches_the_whole_record_from_the_field_checks_ringing_on(name):
    r = RUNS[name]
    for cut in r["cuts"]:
        if cut["group_delays"] < verify.CONTINUED_RING_DELAYS:
            continue
        d = _changes(r, cut, "continued")
        assert abs(d["centre"]) < 0.005 and abs(d["bandwidth"]) < 0.005, cut["group_delays"]
        assert abs(d["rl"]) < 0.1 and abs(d["loss"]) < 0.02, cut["group_delays"]
        assert cut["fit_check"] < ringdown.CHECK_LIMIT


def test_on_the_8_percent_filter_continuing_beats_recording_after_one_group_delay():
    r = RUNS["ms-alumina-tap-10g-n3-8pct"]
    first = r["cuts"][0]
    rec, cont = _changes(r, first, "recorded"), _changes(r, first, "continued")
    assert abs(rec["centre"]) > 0.002 and abs(rec["bandwidth"]) > 0.008  # as cut: off
    assert abs(cont["centre"]) < 0.0005 and abs(cont["bandwidth"]) < 0.001  # continued: on

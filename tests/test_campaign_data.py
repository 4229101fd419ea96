"""How a field-solver campaign writes its data file (benchmarks/campaign_data.py)."""

from __future__ import annotations

import json
import sys

from conftest import ROOT

sys.path.insert(0, str(ROOT / "benchmarks"))
import campaign_data


def _key(r: dict) -> tuple:
    return r["case"], r["mesh"]


def test_two_campaigns_writing_one_file_keep_each_others_runs(tmp_path):
    path = tmp_path / "runs.json"
    a_runs = [{"case": "a", "mesh": 0}]
    campaign_data.save_doc(path, {"what": "x", "runs": a_runs}, key=_key)
    # a second campaign loaded the file before the first one wrote: it knows nothing of "a"
    campaign_data.save_doc(path, {"what": "x", "runs": [{"case": "b", "mesh": 0}]}, key=_key)
    a_runs.append({"case": "a", "mesh": 1})
    campaign_data.save_doc(path, {"what": "x", "runs": a_runs}, key=_key)
    runs = campaign_data.load_runs(path)
    assert sorted(map(_key, runs)) == [("a", 0), ("a", 1), ("b", 0)]


def test_a_replaced_run_stays_replaced_and_without_a_key_the_file_is_the_doc(tmp_path):
    path = tmp_path / "runs.json"
    campaign_data.save_doc(path, {"what": "x", "runs": [{"case": "a", "mesh": 0, "v": 1}]})
    new = {"case": "a", "mesh": 0, "v": 2}
    campaign_data.save_doc(path, {"what": "x", "runs": [new]}, key=_key)
    assert campaign_data.load_runs(path) == [new]
    campaign_data.save_doc(path, {"what": "y", "runs": []})
    assert json.loads(path.read_text()) == {"what": "y", "runs": []}
    assert not path.with_suffix(".tmp").exists()

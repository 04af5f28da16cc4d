"""whats_new.json: the sentences cut long lists; the items give scripts every one in full.

The tables are built by hand here (the run-level check is in test_panels_cli.py, on the
README's worked example); no numeric reference is involved.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from mapdrift.brief.whatsnew import WhatsNew


def _news() -> WhatsNew:
    units = [f"0700{i}" for i in range(1, 8)]
    jumps = pd.DataFrame(
        {
            "unit": units,
            "name": [f"Place {i}" for i in range(1, 8)],
            "from_period": "2024",
            "to_period": "2025",
            "from_class": 1,
            "to_class": 4,
            "from_label": "<= 5.9",
            "to_label": "20.4 - 40.7",
            "size": 3,
            "direction": "up",
            "value_before": 4.5,
            "value_after": [float("nan")] + [30.0] * 6,
            "spike": False,
        }
    )
    events = pd.DataFrame(
        [(u, "joined_high_cluster", "2025") for u in units], columns=["unit", "event", "period"]
    )
    trends = pd.DataFrame(
        {
            "unit": ["07001"],
            "direction": ["rising"],
            "theil_sen_slope": [1.5],
            "before": ["falling"],
        }
    )
    ended = pd.DataFrame({"unit": ["07002"], "direction": ["falling"]})
    return WhatsNew(
        previous=Path("outputs/2024"),
        previous_periods=("2023", "2024"),
        new_jumps=jumps,
        cluster_events=events,
        new_trends=trends,
        ended_trends=ended,
        findings=("Newly named in a data check (ids-table-only): 07999.",),
        small_base=frozenset({"07003"}),
        names={u: f"Place {i}" for i, u in enumerate(units, 1)},
        finding_items=(
            {
                "kind": "finding",
                "unit": None,
                "name": None,
                "what": "newly named in a data check",
                "from": None,
                "to": None,
                "code": "ids-table-only",
                "level": "warning",
                "units": ["07999"],
                "message": "...",
            },
        ),  # fmt: skip
    )


def test_sentences_cut_and_items_complete():
    wn = _news()
    doc = json.loads(json.dumps(wn.to_json()))  # plain JSON (NaN became null)
    assert doc["news"][0].startswith("7 new jumps:") and "(7 in all)" in doc["news"][0]
    assert doc["counts"] == {"jump": 7, "cluster": 7, "trend": 1, "trend-ended": 1, "finding": 1}
    jumps = [i for i in doc["items"] if i["kind"] == "jump"]
    assert [j["unit"] for j in jumps] == [f"0700{i}" for i in range(1, 8)]
    j = jumps[2]
    assert j["name"] == "Place 3" and j["what"] == "jumped up 3 classes" and j["small_base"]
    assert j["from"] == {"period": "2024", "class": 1, "label": "<= 5.9", "value": 4.5}
    assert j["to"]["class"] == 4 and jumps[0]["to"]["value"] is None
    ev = [i for i in doc["items"] if i["kind"] == "cluster"]
    assert len(ev) == 7 and ev[0]["from"] == "not high-high" and ev[0]["to"] == "high-high"
    (tr,) = [i for i in doc["items"] if i["kind"] == "trend"]
    assert (tr["from"], tr["to"], tr["theil_sen_slope"]) == ("falling", "rising", 1.5)
    (end,) = [i for i in doc["items"] if i["kind"] == "trend-ended"]
    assert (end["unit"], end["from"], end["to"]) == ("07002", "falling", "no significant trend")
    (f,) = [i for i in doc["items"] if i["kind"] == "finding"]
    assert f["code"] == "ids-table-only" and f["units"] == ["07999"]
    for item in doc["items"]:
        assert {"kind", "unit", "name", "what", "from", "to"} <= set(item)


def test_cluster_news_of_a_small_base_unit_carries_the_caution():
    # a unit on a small base entering or leaving a cluster is read with care, as its jumps are
    # (a new user's report: 07038 "left a high-high cluster" with no caveat)
    cluster = next(b for b in _news().bullets() if "newly entered a high-high cluster" in b)
    assert "07003 Place 3 (2025, small base: unstable)" in cluster
    assert "07001 Place 1 (2025)" in cluster

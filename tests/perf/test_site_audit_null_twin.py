"""The demo's site audit, planted and null, over many seeds (the light twin in tests/demo/site_difference.py:
the demo's latent states and simulator log, windows labelled with the true activity).

Planted (south shares benches): the audit's 95 % interval of south's activity AUC minus the
rest must exclude zero below in nearly every seed.  Null twin (both centres alike): it may
exclude zero in at most 10 % of 20 seeds (a 95 % interval should do so in about 5 %).

Run: FIELDMARK_PERF=1 pytest tests/perf/test_site_audit_null_twin.py -s
"""
from __future__ import annotations

import sys
from pathlib import Path

from export.detector_check import CheckSettings, check_dimension

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "demo"))
from site_difference import site_windows  # noqa: E402

SEEDS = range(20)


def south_difference(seed: int, planted: bool) -> dict:
    features, truth, learner, site = site_windows(seed, planted)
    result = check_dimension(features, truth, learner, "activity", CheckSettings(by=("site",), resamples=500, seed=seed),
                             context=site.to_frame("site"))
    return [group for group in result.by["site"] if group["group"] == "south"][0]["difference_from_rest"]["auc"]


def test_planted_difference_found_and_null_twin_rarely_flagged():
    found = [south_difference(seed, True)["high"] < 0 for seed in SEEDS]
    null = [south_difference(seed, False) for seed in SEEDS]
    false_positives = sum(d["high"] < 0 or d["low"] > 0 for d in null)
    print(f"\nplanted: interval below zero in {sum(found)}/{len(found)} seeds; "
          f"null twin: interval excludes zero in {false_positives}/{len(null)} seeds")
    assert sum(found) >= 18
    assert false_positives <= 2                              # <= 10 % of 20 seeds

"""A replay coding job planned ahead: which clips, in which order, for which coders.

Coding every clip of every learner is rarely the job (the demo's twelve learners
already give 730 clips).  A plan samples clips and shares them out, reproducibly, so a
second coder's device that makes the same plan from the same logs gets the same clips.

Rules this module decides (one home each):
- Candidates: the chosen learners' clips (observer_app/coding/replay.py cuts them);
  with ``min_events`` K only clips with at least K log events.  The rule is recorded
  with the plan because it skews the labels (idle learners have few events).
- Sample: ``per_learner`` N clips of each learner, or a ``share`` of all candidates,
  chosen by one seeded random key per candidate (numpy default_rng(seed)); the plan's
  order is the order of those keys, so learners are interleaved at random.
- Double coding: with two or more coders, ``double_share`` of the sampled clips (the
  lowest keys of a second seeded draw) go to two coders, the rest to one.  The clip
  at plan position i goes to coder i mod m, a double-coded one also to coder i+1 mod m.
  Coders are not told which of their clips are double-coded.
- Identity: the plan is keyed to a digest of the candidate clips it was cut from
  (clip id and event count of every clip of the chosen learners).  Its id hashes the
  rule, the coders and that digest, so two devices with the same logs and the same
  rule make the same plan, and a device whose log copy differs is told so.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from sync.errors import InputError

# ASSIGNMENT table (``assign_clips``): the CLIPS columns (replay.py) and position (plan order),
# coder, double (the clip is coded by two coders).
ASSIGNMENT_EXTRA_COLUMNS: tuple[str, ...] = ("position", "coder", "double")


@dataclass(frozen=True)
class ReplayRule:
    """How a plan samples and shares clips; exactly one of per_learner and share, or neither (all)."""

    learners: tuple[str, ...]
    per_learner: int | None = None
    share: float | None = None  # 0 < share <= 1
    min_events: int = 1
    seed: int = 0
    double_share: float = 0.0
    coders: tuple[str, ...] = ()

    def describe(self) -> str:
        """The rule in one line, as the manifest and the screens write it."""
        if self.per_learner is not None:
            sample = f"{self.per_learner} clips per learner"
        elif self.share is not None:
            sample = f"{self.share:.0%} of clips"
        else:
            sample = "every clip"
        double = f", {self.double_share:.0%} double-coded" if self.double_share and len(self.coders) > 1 else ""
        return (f"{sample} with at least {self.min_events} log event{'s' if self.min_events != 1 else ''}, "
                f"seeded random order (seed {self.seed}), coders {', '.join(self.coders)}{double}")


def parse_sample(text: str) -> tuple[int | None, float | None]:
    """'5' or '5 per learner' -> five per learner, '20%' or '20% of all' -> a fifth of all clips,
    'all' or '' -> every clip."""
    text = text.strip().lower().removesuffix("per learner").removesuffix("of all").strip()
    if text in ("", "all"):
        return None, None
    try:
        if text.endswith("%"):
            share = float(text[:-1]) / 100
            if 0 < share <= 1:
                return None, share
        elif int(text) > 0:
            return int(text), None
    except ValueError:
        pass
    raise InputError(None, "sample", f"{text!r} is not a sample; write a number of clips per learner (5), "
                                     f"a share of all clips (20%) or all")


def clips_digest(clips: pd.DataFrame) -> str:
    """SHA-256 of every candidate clip's id and event count (order-independent)."""
    lines = sorted(clips["clip"].astype(str) + ":" + clips["events"].astype(str))
    return hashlib.sha256("\n".join(lines).encode("utf-8")).hexdigest()


def plan_id(rule: ReplayRule, digest: str) -> str:
    text = json.dumps({**asdict(rule), "digest": digest}, sort_keys=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def assign_clips(clips: pd.DataFrame, rule: ReplayRule) -> pd.DataFrame:
    """The ASSIGNMENT table: one row per (clip, coder), in plan order (see the module docstring).

    ``clips`` is the CLIPS table of the rule's learners (every clip, before sampling).
    """
    if not rule.coders:
        raise InputError(None, "coders", "a replay plan needs at least one coder")
    if rule.double_share and len(rule.coders) < 2:
        raise InputError(None, "double-coded share", "double coding needs two or more coders; "
                                                     "name them, or set the double-coded share to 0")
    candidates = clips[clips["events"] >= rule.min_events].reset_index(drop=True)
    keys = np.random.default_rng(rule.seed).random(len(candidates))
    candidates = candidates.assign(key=keys)
    if rule.per_learner is not None:
        rank = candidates.groupby("learner", sort=False)["key"].rank(method="first")
        candidates = candidates[rank <= rule.per_learner]
    elif rule.share is not None:
        keep = int(round(rule.share * len(candidates)))
        candidates = candidates.nsmallest(keep, "key")
    chosen = candidates.sort_values("key", kind="stable").reset_index(drop=True).drop(columns="key")
    chosen["position"] = np.arange(len(chosen))
    doubles = int(round(rule.double_share * len(chosen))) if len(rule.coders) > 1 else 0
    second = np.random.default_rng([rule.seed, 1]).random(len(chosen))
    chosen["double"] = np.zeros(len(chosen), dtype=bool)
    if doubles:
        chosen.loc[np.argsort(second, kind="stable")[:doubles], "double"] = True
    count = len(rule.coders)
    first = chosen.assign(coder=[rule.coders[i % count] for i in chosen["position"]])
    also = chosen[chosen["double"]]
    also = also.assign(coder=[rule.coders[(i + 1) % count] for i in also["position"]])
    table = pd.concat([first, also], ignore_index=True).sort_values(["position", "coder"], kind="stable")
    return table.reset_index(drop=True)

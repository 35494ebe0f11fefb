"""Pairing coders' observations into units (agreement.pairing)."""
from __future__ import annotations

from agreement.pairing import pair_observations, unit_id


def units_by_observation(units):
    return {row.observation_id: row.unit for row in units.itertuples()}


def test_paired_run_matches_by_slot_even_when_starts_differ(observations):
    a = observations.add("ann", "L01", 0, paired=True, slot=3, activity="on_task")
    b = observations.add("ben", "L01", 9, paired=True, slot=3, activity="off_task")  # 9 s > tolerance 5 s
    units, report = pair_observations(observations.frame(), ["activity", "affect"], tolerance_s=5)
    assert set(units["observation_id"]) == {a, b}
    assert set(units["matched_by"]) == {"slot"}
    assert report.unmatched == 0 and report.units == 1


def test_different_slots_are_not_paired_by_slot(observations):
    observations.add("ann", "L01", 0, paired=True, slot=3, activity="on_task")
    observations.add("ben", "L01", 0, paired=True, slot=4, activity="on_task")
    units, report = pair_observations(observations.frame(), ["activity"], tolerance_s=10)
    # Not the same slot, but same learner and start: the time rule pairs them.
    assert set(units["matched_by"]) == {"time"}


def test_time_rule_is_one_to_one_and_nearest_first(observations):
    a = observations.add("ann", "L02", 100, activity="on_task")
    near = observations.add("ben", "L02", 103, activity="on_task")
    far = observations.add("ben", "L02", 96, activity="away")
    units, report = pair_observations(observations.frame(), ["activity"], tolerance_s=10)
    assert set(units["observation_id"]) == {a, near}
    assert report.unmatched == 1 and report.unmatched_by_coder == {"ben": 1}
    assert far not in set(units["observation_id"])


def test_time_rule_needs_same_learner_and_tolerance(observations):
    observations.add("ann", "L03", 0, activity="on_task")
    observations.add("ben", "L04", 0, activity="on_task")          # other learner
    observations.add("ann", "L05", 0, activity="on_task")
    observations.add("ben", "L05", 10.5, activity="on_task")       # 10.5 s apart, tolerance 10 s
    units, report = pair_observations(observations.frame(), ["activity"], tolerance_s=10)
    assert len(units) == 0
    assert report.unmatched == 4 and report.units == 0


def test_three_coders_within_tolerance_form_one_unit(observations):
    ids = [observations.add(coder, "L06", start, activity="on_task")
           for coder, start in (("ann", 0), ("ben", 2), ("cat", 4))]
    units, _ = pair_observations(observations.frame(), ["activity"], tolerance_s=5)
    assert units["unit"].nunique() == 1 and set(units["observation_id"]) == set(ids)


def test_replay_codes_pair_by_clip(observations):
    a = observations.add("ann", "L07", 0, mode="replay", clip="clip-1", activity="on_task")
    b = observations.add("ben", "L07", 500, mode="replay", clip="clip-1", activity="on_task")
    observations.add("ann", "L07", 0, mode="replay", clip="clip-2", activity="on_task")
    units, report = pair_observations(observations.frame(), ["activity"], tolerance_s=10)
    assert set(units["observation_id"]) == {a, b} and set(units["matched_by"]) == {"clip"}
    assert report.unmatched == 1


def test_unit_ids_are_stable_across_runs_and_row_order(observations):
    for learner, start in (("L01", 0), ("L02", 20), ("L03", 40)):
        observations.add("ann", learner, start, activity="on_task")
        observations.add("ben", learner, start + 1, activity="on_task")
    frame = observations.frame()
    first, _ = pair_observations(frame, ["activity"], tolerance_s=10)
    shuffled, _ = pair_observations(frame.sample(frac=1, random_state=3), ["activity"], tolerance_s=10)
    assert units_by_observation(first) == units_by_observation(shuffled)
    # The id is the documented one: sha1 over the sorted observation ids (agreement/tables.py).
    pair = first[first["learner"] == "L02"]
    assert pair["unit"].iloc[0] == unit_id(list(pair["observation_id"]))
    assert len(pair["unit"].iloc[0]) == 12


def test_units_table_has_documented_columns(observations):
    from agreement.tables import UNIT_COLUMNS

    observations.add("ann", "L01", 0, note="leaning away", activity="on_task")
    observations.add("ben", "L01", 1, activity="away")
    units, _ = pair_observations(observations.frame(), ["activity", "affect"], tolerance_s=10)
    assert list(units.columns) == list(UNIT_COLUMNS) + ["activity", "affect"]
    assert set(units["note"]) == {"leaning away", ""}


def test_paired_run_pairs_only_windows_that_overlap_on_the_log_clock(observations):
    from sync.clock import manual_model
    from sync.windows import observations_on_log_clock

    # Both laptops started slot 0 when their own clock said 09:00; ben's runs 28 s ahead,
    # so on the log's clock his 20 s windows begin 28 s earlier: never the same moment.
    observations.add("ann", "L01", 0, paired=True, slot=0, activity="on_task")
    observations.add("ben", "L01", 0, paired=True, slot=0, activity="on_task")
    observations.add("ann", "L02", 20, paired=True, slot=1, activity="on_task")
    observations.add("ben", "L02", 20, paired=True, slot=1, activity="on_task")
    frame = observations.frame().drop(columns=["log_start_ns", "log_end_ns"])
    apart = observations_on_log_clock(frame, {"laptop-ben": manual_model("laptop-ben", 28.0)})
    units, report = pair_observations(apart, ["activity"], tolerance_s=10)
    assert len(units) == 0 and report.paired_run_not_overlapping == 4 and report.unmatched == 4
    close = observations_on_log_clock(frame, {"laptop-ben": manual_model("laptop-ben", 5.0)})
    units, report = pair_observations(close, ["activity"], tolerance_s=10)
    assert report.units == 2 and set(units["matched_by"]) == {"slot"} and report.paired_run_not_overlapping == 0


def test_pairing_id_names_the_paired_run_when_given(observations):
    observations.add("ann", "L01", 0, paired=True, slot=0, activity="on_task")
    observations.add("ben", "L01", 2, paired=True, slot=0, activity="on_task")
    observations.add("cat", "L01", 4, paired=True, slot=0, activity="on_task")
    frame = observations.frame().assign(pairing_id=["run-7", "run-7", "run-8"])
    units, report = pair_observations(frame, ["activity"], tolerance_s=1)  # too tight for the time rule
    assert set(units["coder"]) == {"ann", "ben"} and report.unmatched_by_coder == {"cat": 1}

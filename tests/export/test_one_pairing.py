"""One pairing for every verb: agree, adjudicate and export see the same units, on the
log's clock, and adjudications stay attached to the observations they settle."""
from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pandas as pd

from agreement.pairing import unit_id
from observer_app.study import row_chain
from observer_app.study.foreign_store import read_foreign_store
from observer_app.study.store import MIGRATION_ADJUDICATED_OBSERVATIONS, MIGRATIONS, SCHEMA_VERSION, Store, _statements
from tests.conftest import assert_user_error, call_cli
from tests.export.small_studies import LEARNERS, ROUNDS, solo_laptops_study


def agree_json(study: Path) -> dict:
    result = call_cli("agree", study, "--json", "--resamples", "20")
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout)


def adjudicate_every_disagreement(study: Path, tmp_path: Path) -> pd.DataFrame:
    """A lead settles every disagreement with a code neither coder gave; returns the decisions."""
    listed = tmp_path / "disagreements.csv"
    assert call_cli("agree", study, "--disagreements", listed, "--resamples", "20").returncode == 0
    disagreements = pd.read_csv(listed, dtype=str, keep_default_na=False)
    assert len(disagreements) > 0
    fresh = {"activity": "rapid_guessing", "affect": "bored"}
    decisions = pd.DataFrame({"unit": disagreements["unit"], "dimension": disagreements["dimension"],
                              "code": disagreements["dimension"].map(fresh), "adjudicator": "lead", "reason": "video"})
    decisions.to_csv(tmp_path / "decisions.csv", index=False)
    result = call_cli("adjudicate", study, tmp_path / "decisions.csv")
    assert result.returncode == 0, result.stderr
    return decisions


def export_keeping_ids(study: Path, out: Path) -> tuple[pd.DataFrame, dict]:
    result = call_cli("export", study, "--out", out, "--keep-ids", "--json")
    assert result.returncode == 0, result.stderr
    return pd.read_parquet(out), json.loads(result.stdout)


def test_solo_laptops_28_s_apart_give_the_same_units_in_agree_and_export(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    pairing = agree_json(study)["pairing"]
    assert pairing["units"] == len(LEARNERS) * ROUNDS and pairing["unmatched"] == 0
    decisions = adjudicate_every_disagreement(study, tmp_path)
    table, summary = export_keeping_ids(study, tmp_path / "windows.parquet")
    assert summary["units"] == pairing["units"]
    # each unit exported once: one row per moment a learner was watched, none twice
    assert len(table) == pairing["units"] and table["window_id"].is_unique
    ordered = table.sort_values(["learner", "start_ns"])
    same_learner = ordered["learner"].eq(ordered["learner"].shift())
    assert not (same_learner & (ordered["start_ns"] < ordered["end_ns"].shift())).any()  # no moment twice
    exported = table.set_index("window_id")
    for decision in decisions.itertuples():
        assert exported.loc[decision.unit, decision.dimension] == decision.code
        assert exported.loc[decision.unit, f"label_source_{decision.dimension}"] == "adjudicated"


def test_an_adjudication_follows_its_observations_when_a_third_coder_joins_the_unit(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    decisions = adjudicate_every_disagreement(study, tmp_path)
    before = set(decisions["unit"])
    third = tmp_path / "cat.csv"  # a third coder, on a laptop whose clock agrees with the log
    first = pd.Timestamp("2026-03-03T08:00:21Z")  # L02's first window (ann 08:00:20), where coders disagree
    third.write_text(f"coder,device,learner,time,activity\ncat,laptop-c,L02,{first.isoformat()},on_task\n")
    assert call_cli("import", study, third).returncode == 0
    assert call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=28",
                    "--set-offset", "laptop-c=0").returncode == 0
    table, _ = export_keeping_ids(study, tmp_path / "windows.parquet")
    assert not before <= set(table["window_id"])  # the unit of L02's first window has a new id ...
    row = table[(table["learner"] == "L02") & (table["coders"] == 3)]
    assert len(row) == 1
    assert row["activity"].item() == "rapid_guessing"  # ... and the adjudication still reaches it
    assert row["label_source_activity"].item() == "adjudicated"


def test_export_refuses_an_adjudication_no_unit_holds(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    adjudicate_every_disagreement(study, tmp_path)
    # A refit that puts ben's laptop a minute off splits every unit: nothing holds the decisions any more.
    assert call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=88").returncode == 0
    out = tmp_path / "windows.parquet"
    result = call_cli("export", study, "--out", out)
    assert_user_error(result, "observations.sqlite", "adjudications", "no longer one unit", "lead",
                      "--disagreements")
    assert not out.exists()


def test_an_old_stores_adjudications_are_traced_to_their_observations(tmp_path: Path) -> None:
    """A store of the previous schema, adjudicated by the unit ids export used to make
    (pairing on the devices' own clocks), keeps those decisions after migrating."""
    study = solo_laptops_study(tmp_path, offset_s=4.0)  # 4 s + 3 s apart: paired on device clocks too
    with Store(study / "observations.sqlite") as store:
        observations = store.observations(["activity", "affect"])
    ann = observations[(observations["coder"] == "ann") & (observations["learner"] == "L02")].sort_values("window_start")
    ben = observations[(observations["coder"] == "ben") & (observations["learner"] == "L02")].sort_values("window_start")
    old_unit = unit_id([ann["observation_id"].iloc[0], ben["observation_id"].iloc[0]])
    connection = sqlite3.connect(study / "observations.sqlite")  # what the previous schema wrote
    row_chain.register(connection)  # the store's insert trigger links the row into its hash chain
    connection.execute("INSERT INTO adjudications (adjudication_id, unit, dimension, code, adjudicator, at_ns, reason) "
                       "VALUES ('a1', ?, 'activity', 'away', 'lead', 1, '')", (old_unit,))
    connection.commit()
    connection.close()
    table, _ = export_keeping_ids(study, tmp_path / "windows.parquet")
    row = table[table["window_id"] == old_unit]
    assert row["activity"].item() == "away" and row["label_source_activity"].item() == "adjudicated"


def test_a_previous_schema_store_migrates_and_keeps_its_adjudications(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    connection = sqlite3.connect(path)
    before = MIGRATIONS.index(MIGRATION_ADJUDICATED_OBSERVATIONS)  # a store from just before that migration
    for step in range(before):
        for statement in _statements(MIGRATIONS[step]):
            connection.execute(statement)
    connection.execute(f"PRAGMA user_version = {before}")
    connection.execute("INSERT INTO adjudications VALUES ('a1','u1','activity','away','lead',1,'')")
    connection.commit()
    connection.close()
    with Store(path) as store:
        assert store.schema_version == SCHEMA_VERSION
        old = store.adjudications()
        assert (old["unit"].tolist(), old["observations"].tolist()) == (["u1"], [""])
    with Store(tmp_path / "new.sqlite") as newer:  # a newer store imports the older one's rows
        assert newer.append_rows(read_foreign_store(path, None).rows)["adjudications"] == 1


def test_agree_on_a_study_without_observations_says_so(tmp_path: Path) -> None:
    study = tmp_path / "study"
    assert call_cli("init", study).returncode == 0
    assert_user_error(call_cli("agree", study), "observations.sqlite", "no observations yet")

"""xAPI statements as learning record stores hand them over: the spec's own example
statements, pages of results, gzip, folders, repeated ids, voiding, homePages, blocks.

The example statements are from the public xAPI specification (adlnet/xAPI-Spec,
xAPI-Data.md, version 1.0.3 text), section named beside each; display names of people
in them are replaced (they are not read), everything the reader uses is as published.
"""
from __future__ import annotations

import copy
import gzip
import json
from datetime import datetime

import numpy as np
import pytest

from sync.errors import InputError
from sync.json_blocks import StatementBlocks
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs
from sync.xapi_reader import Statement

# xAPI-Data.md Appendix A, "Example of a simple Statement".
SIMPLE = {
    "id": "fd41c918-b88b-4b20-a0a5-a4c32391aaa0",
    "timestamp": "2015-11-18T12:17:00+00:00",
    "actor": {"objectType": "Agent", "name": "Example Learner", "mbox": "mailto:user@example.com"},
    "verb": {"id": "http://example.com/xapi/verbs#sent-a-statement", "display": {"en-US": "sent"}},
    "object": {"id": "http://example.com/xapi/activity/simplestatement",
               "definition": {"name": {"en-US": "simple statement"}}},
}
# xAPI-Data.md Appendix A, "Completion with Verb named "attempted" and Duration expressed in seconds".
ATTEMPTED = {
    "id": "7ccd3322-e1a5-411a-a67d-6a735c76f119",
    "timestamp": "2015-12-18T12:17:00+00:00",
    "actor": {"objectType": "Agent", "name": "Example Learner", "mbox": "mailto:example.learner@adlnet.gov"},
    "verb": {"id": "http://adlnet.gov/expapi/verbs/attempted", "display": {"en-US": "attempted"}},
    "object": {"id": "http://example.adlnet.gov/xapi/example/simpleCBT",
               "definition": {"name": {"en-US": "simple CBT course"}}},
    "result": {"score": {"scaled": 0.95}, "success": True, "completion": True, "duration": "PT1234S"},
}
# xAPI-Data.md Appendix A, "A long example Statement": an identified Group (mbox) whose
# members use the other three identifier forms; stored and timestamp with milliseconds.
LONG = {
    "id": "6690e6c9-3ef0-4ed3-8b37-7f3964730bee",
    "actor": {"name": "Team", "mbox": "mailto:teampb@example.com", "objectType": "Group", "member": [
        {"name": "Member A", "account": {"homePage": "http://www.example.com", "name": "13936749"}, "objectType": "Agent"},
        {"name": "Member B", "openid": "http://toby.openid.example.org/", "objectType": "Agent"},
        {"name": "Member C", "mbox_sha1sum": "ebd31e95054c018b10727ccffd2ef2ec3a016ee9", "objectType": "Agent"}]},
    "verb": {"id": "http://adlnet.gov/expapi/verbs/attended", "display": {"en-GB": "attended", "en-US": "attended"}},
    "result": {"success": True, "completion": True, "response": "We agreed on some example actions.",
               "duration": "PT1H0M0S"},
    "context": {"registration": "ec531277-b57b-4c15-8d91-d292c5b2b8f7",
                "statement": {"objectType": "StatementRef", "id": "6690e6c9-3ef0-4ed3-8b37-7f3964730bee"}},
    "timestamp": "2013-05-18T05:32:34.804+00:00",
    "stored": "2013-05-18T05:32:34.804+00:00",
    "authority": {"account": {"homePage": "http://cloud.scorm.com/", "name": "anonymous"}, "objectType": "Agent"},
    "version": "1.0.0",
    "object": {"id": "http://www.example.com/meetings/occurances/34534", "objectType": "Activity"},
}
# xAPI-Data.md 2.3.2 Voiding, Example: voids the statement with id e05aa883-....
VOIDING = {
    "actor": {"objectType": "Agent", "name": "Example Admin", "mbox": "mailto:admin@example.adlnet.gov"},
    "verb": {"id": "http://adlnet.gov/expapi/verbs/voided", "display": {"en-US": "voided"}},
    "object": {"objectType": "StatementRef", "id": "e05aa883-acaf-40ad-bf54-02c8ce485fb0"},
}


def ns(text: str) -> int:
    """Reference instant by the standard library."""
    moment = datetime.fromisoformat(text)
    return int(moment.timestamp()) * 10**9 + moment.microsecond * 1000


def read(folder, name="statements.jsonl", read=None, **entry):
    return read_logs([log_spec_from_toml({"path": name, "format": "xapi", **entry}, folder, 1)], **(read or {}))


def write_lines(path, statements):
    path.write_text("\n".join(json.dumps(s) for s in statements) + "\n")


def test_the_specs_example_statements_map_to_events(tmp_path):
    write_lines(tmp_path / "statements.jsonl", [SIMPLE, ATTEMPTED, LONG])
    events, _ = read(tmp_path)
    by_id = {row.item: row for row in events.itertuples()}
    simple = by_id[SIMPLE["object"]["id"]]
    assert simple.learner == "mailto:user@example.com"            # 2.4.2.3 mbox
    assert simple.action == "http://example.com/xapi/verbs#sent-a-statement"
    assert simple.time_ns == ns("2015-11-18T12:17:00+00:00")      # 4.5 timestamp with offset
    assert simple.outcome == "" and np.isnan(simple.duration_s)
    attempted = by_id[ATTEMPTED["object"]["id"]]
    assert attempted.outcome == "correct"                         # 2.4.5 success true
    assert attempted.duration_s == 1234.0                         # 4.6 PT1234S
    long = by_id[LONG["object"]["id"]]
    assert long.learner == "mailto:teampb@example.com"            # 2.4.2.2 identified Group
    assert long.duration_s == 3600.0                              # PT1H0M0S
    assert long.time_ns == ns("2013-05-18T05:32:34.804+00:00")    # milliseconds kept (4.5)


def test_member_identifier_forms_as_actors(tmp_path):
    """The long example's members as actors: account, openid, mbox_sha1sum (2.4.2.3)."""
    statements = []
    for member in LONG["actor"]["member"]:
        statement = copy.deepcopy(ATTEMPTED)
        statement["id"] = None
        statement["actor"] = member
        statements.append(statement)
    write_lines(tmp_path / "statements.jsonl", statements)
    events, _ = read(tmp_path)
    assert sorted(events["learner"].astype(str)) == sorted(
        ["13936749", "http://toby.openid.example.org/", "ebd31e95054c018b10727ccffd2ef2ec3a016ee9"])


def test_voided_statement_and_the_voiding_statement_are_not_events(tmp_path):
    target = copy.deepcopy(ATTEMPTED)
    target["id"] = "E05AA883-acaf-40ad-bf54-02c8ce485fb0"  # UUIDs compare without case (RFC 4122 section 3)
    kept = copy.deepcopy(SIMPLE)
    write_lines(tmp_path / "statements.jsonl", [target, kept, VOIDING])
    events, report = read(tmp_path)
    assert list(events["item"].astype(str)) == [SIMPLE["object"]["id"]]
    assert any("1 voided statements dropped" in warning for warning in report.warnings)


def test_pages_gzip_folders_and_repeated_ids(tmp_path):
    folder = tmp_path / "lrs"
    folder.mkdir()
    # A page of results as the statements resource returns it (xAPI-Data.md 2.5
    # StatementResult: "statements" and "more"), pretty-printed over many lines.
    page = {"statements": [SIMPLE, ATTEMPTED], "more": "/xapi/statements/more/0123"}
    (folder / "page1.json").write_text(json.dumps(page, indent=2))
    # The same statement again (the next export overlapped) plus a new one, gzipped lines.
    with gzip.open(folder / "page2.jsonl", "wt") as handle:
        handle.write(json.dumps(ATTEMPTED) + "\n" + json.dumps(LONG) + "\n")
    events, report = read(tmp_path, name="lrs")
    assert sorted(events["item"].astype(str)) == sorted(
        [SIMPLE["object"]["id"], ATTEMPTED["object"]["id"], LONG["object"]["id"]])
    assert any("1 statements appear more than once" in warning for warning in report.warnings)
    page_text = (folder / "page1.json").read_text().splitlines()
    for row in events.loc[events["source"].astype(str).str.endswith("page1.json"), "source_row"]:
        assert page_text[row - 1].strip() == "{"  # each statement's own opening line in the page
    assert report.rows == 3 and report.rows_read == 4


def test_one_home_page_gives_names_several_give_qualified_names(tmp_path):
    def on(home, name, minute):
        statement = copy.deepcopy(SIMPLE)
        statement["id"] = None
        statement["actor"] = {"account": {"homePage": home, "name": name}}
        statement["timestamp"] = f"2026-03-02T09:{minute:02d}:00Z"
        return statement

    write_lines(tmp_path / "one.jsonl", [on("https://north.example.org", "n-0001", 0)])
    events, report = read(tmp_path, name="one.jsonl")
    assert list(events["learner"].astype(str)) == ["n-0001"]
    write_lines(tmp_path / "two.jsonl", [on("https://north.example.org", "n-0001", 0),
                                         on("https://south.example.org", "n-0001", 1)])
    events, report = read(tmp_path, name="two.jsonl")
    assert sorted(events["learner"].astype(str)) == ["https://north.example.org|n-0001",
                                                     "https://south.example.org|n-0001"]
    assert any("homePage|name" in warning for warning in report.warnings)
    kept, report = read(tmp_path, name="two.jsonl", read={"only_log_ids": ["https://south.example.org|n-0001"]})
    assert list(kept["learner"].astype(str)) == ["https://south.example.org|n-0001"]
    assert report.rows_read == 2 and report.rows == 1


def tricky_statements(count: int) -> list[dict]:
    """Statements whose strings hold brackets, braces, quotes and backslashes."""
    result = []
    for number in range(count):
        statement = copy.deepcopy(ATTEMPTED)
        statement["id"] = f"00000000-0000-4000-8000-{number:012d}"
        statement["object"]["definition"]["name"]["en-US"] = "step {" + "\\" * (number % 4) + '"]' + "[" * (number % 3)
        statement["result"]["response"] = "}\\" * (number % 5) + '"'
        result.append(statement)
    return result


@pytest.mark.parametrize("layout", ["lines", "array", "array_one_line"])
def test_blocks_smaller_than_the_file_give_every_statement_and_its_line(tmp_path, layout):
    statements = tricky_statements(60)
    path = tmp_path / "statements.json"
    if layout == "lines":
        path.write_text("\n\n".join(json.dumps(s) for s in statements))
    else:
        path.write_text(json.dumps(statements, indent=None if layout == "array_one_line" else 1))
    text = path.read_text()
    # Reference: the standard library decoder, statement by statement.
    decoder, expected, position = json.JSONDecoder(), [], 0
    body = text if layout == "lines" else text[1:]
    offset = 0 if layout == "lines" else 1
    while True:
        while position < len(body) and body[position] in " \t\r\n,]":
            position += 1
        if position >= len(body):
            break
        value, end = decoder.raw_decode(body, position)
        expected.append((value["id"], text.count("\n", 0, position + offset) + 1))
        position = end
    got = []
    for block, lines in StatementBlocks(path, "utf-8", Statement, block_bytes=700):
        got.extend(zip([s.id for s in block], lines.tolist()))
    assert got == expected


def test_errors_in_later_blocks_name_their_line(tmp_path):
    statements = tricky_statements(40)
    lines = [json.dumps(s) for s in statements]
    lines[31] = lines[31].replace('"verb": {"id": "http://adlnet.gov/expapi/verbs/attempted"',
                                  '"verb": {"id": 7', 1)
    (tmp_path / "typed.jsonl").write_text("\n".join(lines))
    with pytest.raises(InputError, match=r"typed.jsonl: line 32: verb.id: Expected str \| null, got int"):
        list(StatementBlocks(tmp_path / "typed.jsonl", "utf-8", Statement, block_bytes=600))
    lines = [json.dumps(s) for s in statements]
    lines[27] = lines[27][:-1]
    (tmp_path / "cut.jsonl").write_text("\n".join(lines))
    with pytest.raises(InputError, match=r"cut.jsonl: line 28 column \d+: malformed JSON"):
        list(StatementBlocks(tmp_path / "cut.jsonl", "utf-8", Statement, block_bytes=600))
    (tmp_path / "latin.jsonl").write_bytes(("\n".join(lines[:3]) + '\n{"id": "caf\xe9"}').encode("latin-1"))
    with pytest.raises(InputError, match=r"latin.jsonl: line 4 column \d+: is not valid UTF-8 text; set encoding"):
        read(tmp_path, name="latin.jsonl")
    events, _ = read(tmp_path, name="latin.jsonl", encoding="latin-1")
    assert len(events) == 3
    broken = json.dumps(statements[:30], indent=1).replace('"success": true', '"success": "yes"', 1)
    (tmp_path / "array.json").write_text(broken)
    line = next(n for n, text in enumerate(broken.splitlines(), start=1) if '"success": "yes"' in text)
    opening = max(n for n, text in enumerate(broken.splitlines()[:line], start=1) if text == " {")
    with pytest.raises(InputError, match=rf"array.json: line {opening}: result.success: Expected bool \| null"):
        read(tmp_path, name="array.json")


def test_only_the_observed_learners_are_kept_and_counted(tmp_path):
    statements = []
    for number in range(30):
        statement = copy.deepcopy(ATTEMPTED)
        statement["id"] = None
        statement["actor"] = {"account": {"homePage": "https://sim.example.org", "name": f"n-{number % 3:04d}"}}
        statement["timestamp"] = f"2026-03-02T09:{number:02d}:00Z"
        statements.append(statement)
    write_lines(tmp_path / "statements.jsonl", statements)
    everything, _ = read(tmp_path)
    kept, report = read(tmp_path, read={"only_log_ids": ["n-0001"]})
    reference = everything[everything["learner"] == "n-0001"].reset_index(drop=True)
    assert kept["time_ns"].tolist() == reference["time_ns"].tolist()
    assert kept["source_row"].tolist() == reference["source_row"].tolist()
    assert report.rows_read == 30 and report.rows == 10


def test_a_large_file_read_in_parallel_stretches_gives_the_same_events_and_lines(tmp_path, monkeypatch):
    import sync.json_blocks as json_blocks

    statements = tricky_statements(400)
    write_lines(tmp_path / "statements.jsonl", statements)
    serial, _ = read(tmp_path)
    monkeypatch.setattr(json_blocks, "PARALLEL_MIN_BYTES", 1)
    assert len(json_blocks.parallel_stretches(tmp_path / "statements.jsonl", "utf-8", 2)) == 2
    parallel, _ = read(tmp_path)
    assert parallel.equals(serial)
    lines = [json.dumps(s) for s in statements]
    lines[350] = lines[350].replace('"success": true', '"success": "yes"')
    (tmp_path / "statements.jsonl").write_text("\n".join(lines))
    with pytest.raises(InputError, match=r"statements.jsonl: line 351: result.success"):
        read(tmp_path)


def test_arrows_fast_path_and_the_exact_path_give_the_same_events(tmp_path, monkeypatch):
    import sync.xapi_reader as xapi_reader

    statements = []
    actors = [{"account": {"homePage": "https://sim.example.org", "name": "n-0001"}}, {"mbox": "mailto:a@example.org"},
              {"mbox_sha1sum": "ebd31e95054c018b10727ccffd2ef2ec3a016ee9"}, {"openid": "http://id.example.org/7"}]
    results = [None, {"success": True}, {"success": False, "duration": "PT4H35M59.14S"}, {"completion": True},
               {"duration": "PT12.5S"}]
    for number in range(40):
        statement = copy.deepcopy(ATTEMPTED)
        statement["id"] = f"00000000-0000-4000-8000-{number:012d}"
        statement["actor"] = actors[number % 4]
        statement["timestamp"] = f"2026-03-02T09:{number:02d}:00{'Z' if number % 2 else '+01:00'}"
        if results[number % 5] is None:
            del statement["result"]
        else:
            statement["result"] = results[number % 5]
        if number % 7 == 0:
            statement["stored"] = statement.pop("timestamp")
        statements.append(statement)
    voiding = copy.deepcopy(VOIDING)
    voiding["object"]["id"] = statements[3]["id"]
    write_lines(tmp_path / "statements.jsonl", statements + [voiding, statements[5]])
    spec = log_spec_from_toml({"path": "statements.jsonl", "format": "xapi"}, tmp_path, 1)
    assert xapi_reader._read_with_arrow(spec, tmp_path / "statements.jsonl", None) is not None
    fast, fast_report = read(tmp_path)
    monkeypatch.setattr(xapi_reader, "_read_with_arrow", lambda *arguments: None)
    exact, exact_report = read(tmp_path)
    assert fast.equals(exact)
    assert fast_report.warnings == exact_report.warnings
    assert len(fast) == 39  # one voided, one repeated id

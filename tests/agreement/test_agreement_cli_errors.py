"""Bad input to `fieldmark agree`: exit 2, one line naming the problem, nothing written."""
from __future__ import annotations

from tests.conftest import assert_user_error, call_cli, run_cli


def write(tmp_path, text, name="codes.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_missing_coder_column(tmp_path):
    csv = write(tmp_path, "unit,activity\nu1,on_task\n")
    assert_user_error(run_cli("agree", str(csv)), "codes.csv", "coder")


def test_same_coder_twice_on_a_unit_names_the_row(tmp_path):
    csv = write(tmp_path, "unit,coder,activity\nu1,ann,on_task\nu1,ben,on_task\nu1,ann,away\n")
    assert_user_error(call_cli("agree", str(csv)), "row 4", "twice")


def test_ordinal_words_need_an_order(tmp_path):
    csv = write(tmp_path, "unit,coder,effort\nu1,ann,low\nu1,ben,high\n")
    assert_user_error(call_cli("agree", str(csv), "--level", "ordinal"), "--order")


def test_code_outside_order(tmp_path):
    csv = write(tmp_path, "unit,coder,effort\nu1,ann,low\nu1,ben,huge\n")
    assert_user_error(call_cli("agree", str(csv), "--level", "ordinal", "--order", "low,mid,high"), "huge")


def test_interval_codes_must_be_numbers(tmp_path):
    csv = write(tmp_path, "unit,coder,effort\nu1,ann,low\nu1,ben,high\n")
    assert_user_error(call_cli("agree", str(csv), "--level", "interval", "--order", "low,high"), "numbers")


def test_unknown_coder_option(tmp_path):
    csv = write(tmp_path, "unit,coder,activity\nu1,ann,on_task\nu1,ben,on_task\n")
    assert_user_error(call_cli("agree", str(csv), "--coders", "ann,zoe"), "zoe")


def test_missing_file(tmp_path):
    assert_user_error(call_cli("agree", str(tmp_path / "nothing.csv")), "nothing.csv")


def test_report_into_missing_folder_writes_nothing(tmp_path):
    csv = write(tmp_path, "unit,coder,activity\nu1,ann,on_task\nu1,ben,away\nu2,ann,away\nu2,ben,away\n")
    target = tmp_path / "absent" / "report.html"
    assert_user_error(run_cli("agree", str(csv), "--report", str(target)), "does not exist")
    assert not target.parent.exists()


def test_session_view_needs_session_ids(tmp_path):
    csv = write(tmp_path, "unit,coder,activity\nu1,ann,on_task\nu1,ben,on_task\n")
    assert_user_error(call_cli("agree", str(csv), "--by", "session"), "session")


def test_plan_rejects_bad_prevalence():
    assert_user_error(call_cli("plan", "--kappa", "0.7", "--width", "0.2", "--prevalence", "0.5"), "--prevalence")

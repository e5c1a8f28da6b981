"""``isotide review``: a sign-off step from the command line, one-line errors and the documented exit codes."""

from __future__ import annotations

import json

import pytest

import engine.io as eio
from engine.cli import main
from tests.review_cases import make_result


@pytest.fixture()
def result(tmp_path):
    return make_result(tmp_path)


def run(capsys, *argv):
    capsys.readouterr()
    code = main(["review", *map(str, argv)])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_submit_then_return_with_notes_by_label_name_and_index(result, capsys):
    code, out, err = run(capsys, result.parent / "case", "--submit", "--comment", "ready")
    assert code == 0 and err == "" and out.strip() == "case_dseg.json: Draft -> Submitted (version 1)"
    code, out, err = run(capsys, result, "--return", "--reviewer", "Dr A", "--label", "TUMOUR", "--slice", "9",
                         "--note", "lower rim missed", "--label", "2", "--slice", "7", "--note", "fine")
    assert code == 0 and "Submitted -> Returned by Dr A" in out
    review = json.loads(result.read_text())["Isotide"]["Review"]
    assert review["State"] == "Returned" and review["Reviewer"] == "Dr A"
    assert review["Decisions"][-1]["Marks"] == [{"Label": 1, "Slice": 9, "Note": "lower rim missed"},
                                                {"Label": 2, "Slice": 7, "Note": "fine"}]
    assert eio.verify(result).ok
    code, out, err = run(capsys, result)
    assert code == 0 and out.startswith("case_dseg.json: Returned, version 1, reviewer Dr A")
    assert "note on label 1, slice 9: lower rim missed" in out and "new version" in out


@pytest.mark.parametrize("argv,code,words", [
    (["--approve", "--reviewer", "Dr A"], 3, ["cannot approve", "Draft"]),
    (["--submit", "--label", "1", "--note", "x"], 2, ["--note", "--slice"]),
    (["--submit", "--label", "liver", "--slice", "3", "--note", "x"], 2, ["--label", "'liver'", "tumour"]),
    (["--submit", "--label", "1", "--slice", "x", "--note", "x"], 2, ["--slice", "'x'"]),
    (["--submit", "--label", "1", "--slice", "40", "--note", "x"], 2, ["--note", "slice 40"]),
    (["--submit", "--reviewer", "a\u0007b"], 2, ["--reviewer", "control"]),
    (["--reviewer", "Dr A"], 2, ["--reviewer", "step"]),
])
def test_bad_steps_and_flags_get_one_line_and_their_exit_code(result, capsys, argv, code, words):
    before = result.read_bytes()
    got, out, err = run(capsys, result, *argv)
    assert got == code and out == "" and len(err.splitlines()) == 1 and err.startswith("isotide review: ")
    assert all(w in err for w in words), err
    assert result.read_bytes() == before


def test_approve_needs_a_reviewer_and_return_a_reason(result, capsys):
    assert run(capsys, result, "--submit")[0] == 0
    code, _, err = run(capsys, result, "--approve")
    assert code == 2 and err.startswith("isotide review: --reviewer:")
    code, _, err = run(capsys, result, "--return", "--reviewer", "Dr A")
    assert code == 2 and err.startswith("isotide review: --comment:")
    assert run(capsys, result, "--approve", "--reviewer", "Dr A")[0] == 0
    code, _, err = run(capsys, result, "--return", "--reviewer", "Dr A", "--comment", "late")
    assert code == 3 and "the result is Approved" in err and str(result) in err


def test_missing_or_foreign_files_are_bad_input(tmp_path, capsys):
    code, _, err = run(capsys, tmp_path / "none_dseg.json", "--submit")
    assert code == 2 and "no such result sidecar" in err and len(err.splitlines()) == 1
    other = tmp_path / "x_dseg.json"
    other.write_text('{"Description": "not ours"}')
    code, _, err = run(capsys, other, "--submit")
    assert code == 2 and "not an Isotide result sidecar" in err


def test_a_result_that_fails_verify_is_exit_1_and_not_reviewed(result, capsys):
    table = result.parent / "case_dseg.tsv"
    table.write_text(table.read_text().replace("tumour", "tumor"))
    before = result.read_bytes()
    code, out, err = run(capsys, result, "--submit")
    assert code == 1 and out == "" and "no longer matches its record" in err and len(err.splitlines()) == 1
    assert result.read_bytes() == before


def test_ctrl_c_before_the_write_records_nothing(result, capsys, monkeypatch):
    from engine.commands import interrupts

    real = eio.verify

    def verify_then_ctrl_c(path):
        report = real(path)
        interrupts._handle(2, None)  # Ctrl-C arrives while the result is being checked
        return report

    monkeypatch.setattr("engine.io.verify", verify_then_ctrl_c)
    before = result.read_bytes()
    code, _, err = run(capsys, result, "--submit")
    assert code == 130 and err.strip() == "isotide review: interrupted"
    assert result.read_bytes() == before

"""The command line in words a committee reads: help without Python types or markup, review
tables within 80 columns with the pages' words, and every command that serves saying which
database it serves and how to sign in (issue #23)."""

from __future__ import annotations

import pytest

from beamaudit.api.cli import COMMAND_MODULES, main
from beamaudit.api.cli.review import group_lines
from beamaudit.dashboards import VOCABULARY

COMMANDS = [
    [], ["serve"], ["scan"], ["listen"], ["pull"], ["review"], ["nightly"], ["explain"],
    ["beam"], ["dose"], ["mgd"], ["demo"], ["db", "upgrade"], ["levels", "import"],
    ["export", "events"], ["token", "create"],
]  # fmt: skip


@pytest.mark.parametrize("command", COMMANDS, ids=lambda c: " ".join(c) or "beamaudit")
def test_help_has_no_python_types_markup_or_long_lines(command, capsys, monkeypatch) -> None:
    monkeypatch.setenv("COLUMNS", "80")
    assert main([*command, "--help"]) == 0
    text = capsys.readouterr().out
    for python in ("<bool>", "<str>", "<int", "<float>", "<list", "<path>", "``", ":func:"):
        assert python not in text, (command, python)
    assert max(len(line) for line in text.splitlines()) <= 80


def test_every_command_module_is_in_the_help() -> None:
    assert "demo" in COMMAND_MODULES


GROUP = {
    "room": "HGH-CR1", "exam_type": "chest_pa", "quantity": "esak_mgy", "n": 22,
    "n_standard": 11, "median": 0.0822, "ci_low": 0.0656, "ci_high": 0.103, "ci_coverage": 0.98,
}  # fmt: skip


def test_review_lines_fit_80_columns_and_name_each_kind_of_level() -> None:
    groups = [
        {**GROUP, "reference_level": 0.13, "level_kind": "local", "status": "insufficient_sample",
         "level_set": "Hollowbrook General Hospital local DRLs (INVENTED)", "ratio_to_level": 0.63},
        {**GROUP, "reference_level": 0.4, "level_kind": "international", "status": "below_level",
         "level_set": "IAEA BSS 115 guidance levels", "ratio_to_level": 0.205},
        {**GROUP, "exam_type": "knee_ap", "reference_level": None, "status": "no_level"},
    ]  # fmt: skip
    lines = group_lines(groups, {"chest_pa": "Chest PA"})
    text = "\n".join(lines)
    assert max(len(line) for line in lines) <= 80
    assert "HGH-CR1 · Chest PA · ESAK (mGy)" in text  # names, not field names
    assert "98% CI 0.0656–0.103 mGy" in text
    assert "Local level 0.13 mGy" in text and "International guidance 0.4 mGy" in text
    assert VOCABULARY["review status"]["below_level"] in text  # the pages' words
    assert VOCABULARY["review status"]["insufficient_sample"] in text
    assert "knee" not in text  # a group without a level is not listed


def test_a_paediatric_band_is_a_block_of_its_own_named_by_its_patients() -> None:
    # ICRP 135 sets paediatric levels per weight band: the band's group and the adults' group
    # of one room, examination and quantity are two blocks, the band's saying who its patients are
    adults = {**GROUP, "quantity": "dap_gy_cm2", "median": 0.0475, "reference_level": 0.1,
              "level_kind": "local", "status": "below_level", "level_set": "local",
              "ratio_to_level": 0.475}  # fmt: skip
    children = {**adults, "median": 0.0228, "reference_level": 0.018, "ratio_to_level": 1.27,
                "status": "above_level", "patient_group": "weight_15_30kg",
                "patient_group_label": "children 15-<30 kg"}  # fmt: skip
    text = "\n".join(group_lines([children, adults], {"chest_pa": "Chest PA"}))
    assert "HGH-CR1 · Chest PA, children 15-<30 kg · DAP (Gy·cm²)" in text
    assert "HGH-CR1 · Chest PA · DAP (Gy·cm²)" in text
    assert "median 0.0475 Gy·cm²" in text and "median 0.0228 Gy·cm²" in text


def test_serve_says_which_database_and_how_to_sign_in(tmp_path, capsys, monkeypatch) -> None:
    import uvicorn

    monkeypatch.setattr(uvicorn.Server, "run", lambda self: None)
    db = tmp_path / "nothing-here.db"
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", f"sqlite:///{db}")
    # one worker: the words come before the server starts, and with more than one uvicorn's
    # supervisor would start real worker processes (tests/api/test_serve_workers.py has those)
    assert main(["serve", "--port", "8123", "--workers", "1"]) == 0
    # as read, wherever the terminal wrapped: a long temporary path (pytest -n adds a folder)
    # may be broken at its hyphen, so the words are compared without their spaces
    out = "".join(capsys.readouterr().out.split())
    for words in (
        f"the database file {db} does not exist",
        f"SQLite file {db}",
        "Sign in at http://127.0.0.1:8123/login",
        "beamaudit token create --role physicist",
    ):
        assert "".join(words.split()) in out, words


def test_exports_carry_the_states_in_the_pages_words_beside_the_codes() -> None:
    import csv
    import io

    from beamaudit.api.runs.export import groups_csv_text

    result = {"groups": [{**GROUP, "reference_level": 0.4, "level_kind": "international",
                          "status": "below_level", "ratio_to_level": 0.205}]}  # fmt: skip
    row = next(csv.DictReader(io.StringIO(groups_csv_text(result))))
    assert row["status"] == "below_level"  # the code, for programs
    assert row["status_words"] == VOCABULARY["review status"]["below_level"]
    assert row["level_kind_words"] == "International guidance"

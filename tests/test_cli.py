"""The `foldwise` command on a real store."""

from __future__ import annotations

from foldwise.cli import main


def test_list_shows_stored_assessments(db_path, small_assessment, capsys):
    assert main(["list", "--db", str(db_path)]) == 0
    assert "no assessments" in capsys.readouterr().out
    small_assessment.save(str(db_path))
    assert main(["list", "--db", str(db_path)]) == 0
    out = capsys.readouterr().out
    assert small_assessment.uuid in out and small_assessment.name in out


def test_resend_with_an_empty_spool(tmp_path, capsys):
    assert main(["resend", "--spool", str(tmp_path / "spool")]) == 0
    assert "nothing spooled" in capsys.readouterr().out

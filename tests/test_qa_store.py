"""Quality review: study files in read-only places (an archive share, a released folder).

Defect: a study file in a read-only folder could not even be shown ("unable to open database
file"), because SQLite's WAL mode wants to create its index file beside it; writing to a
read-only study file ended in a message about disk space. Root ignores permission bits, so the
folder and file are made immutable with chattr (skipped where that is not possible).
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from studykit.cli import main
from studykit.errors import StudyFileError
from studykit.store import StudyFile

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data" / "pump_housing_pilot.study"


def _chattr(flag: str, path: Path) -> bool:
    if shutil.which("chattr") is None:
        return False
    return subprocess.run(["chattr", flag, str(path)], capture_output=True).returncode == 0


@pytest.fixture
def frozen(tmp_path):
    """Yield a function that makes a path immutable; undone after the test."""
    done: list[Path] = []

    def freeze(path: Path) -> None:
        if not _chattr("+i", path):
            pytest.skip("cannot make files immutable here (chattr +i needs root on ext4 etc.)")
        done.append(path)

    yield freeze
    for path in reversed(done):
        _chattr("-i", path)


def test_study_in_read_only_folder_can_be_read(tmp_path, frozen, capsys):
    folder = tmp_path / "released"
    folder.mkdir()
    shutil.copyfile(DEMO, folder / "pilot.study")
    expected = StudyFile(DEMO).load().content_digest()
    frozen(folder)
    sf = StudyFile(folder / "pilot.study")
    assert sf.load().content_digest() == expected
    assert len(sf.audit_log()) >= 1
    assert main(["study", "show", str(folder / "pilot.study")]) == 0
    assert expected in capsys.readouterr().out
    assert not (folder / "pilot.study-shm").exists()


def test_write_to_study_in_read_only_folder_says_why(tmp_path, frozen, capsys):
    folder = tmp_path / "released"
    folder.mkdir()
    shutil.copyfile(DEMO, folder / "pilot.study")
    frozen(folder)
    assert (
        main(
            [
                "study",
                "exclude",
                str(folder / "pilot.study"),
                "bore_diameter",
                "3",
                "--reason",
                "x",
                "--who",
                "QA",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err
    assert "is read-only" in err and "Copy the study file to a folder where you may write" in err
    with pytest.raises(StudyFileError, match="folder .* is read-only"):
        StudyFile(folder / "pilot.study").add_comment("hello", who="QA")


def test_read_only_study_file_write_says_read_only(tmp_path, frozen, capsys):
    path = tmp_path / "pilot.study"
    shutil.copyfile(DEMO, path)
    StudyFile(path).load()  # creates the journal index beside it, as any first use does
    frozen(path)
    with pytest.raises(
        StudyFileError,
        match=r"the study file '.*pilot.study' is read-only; "
        r"nothing was changed",
    ):
        StudyFile(path).exclude("bore_diameter", 3, reason="x", who="QA")
    assert "3" not in StudyFile(path).load().excluded_subgroups("bore_diameter")

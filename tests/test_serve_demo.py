"""`studykit serve --demo` works on a copy: the committed demo study is never written."""

from __future__ import annotations

from studykit.cli.serve import demo_working_copy, find_demo_study
from studykit.store import StudyFile


def test_demo_copy_is_made_once_and_kept(tmp_path, monkeypatch, repo_root):
    monkeypatch.setenv("STUDYKIT_HOME", str(tmp_path / "home"))
    original = find_demo_study(repo_root / "demo_data")
    assert original is not None
    before = original.read_bytes()
    copy = demo_working_copy(original)
    assert copy != original and copy.read_bytes() == before
    StudyFile(copy).add_comment("tried a removal in the demo", who="T. Test")
    again = demo_working_copy(original)
    assert again == copy
    assert any("tried a removal" in c.text for c in StudyFile(again).load().comments)
    assert original.read_bytes() == before

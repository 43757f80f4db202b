"""Tests for firstorder.io.atomic: atomic writes."""

from __future__ import annotations

import os
import stat

import pytest

from firstorder.io.atomic import write_atomic


class TestWriteAtomic:
    def test_writes_text_and_bytes(self, tmp_path):
        write_atomic(tmp_path / "a.txt", "µ and Ω\n")
        write_atomic(tmp_path / "b.bin", b"\x00\x01")
        assert (tmp_path / "a.txt").read_text(encoding="utf-8") == "µ and Ω\n"
        assert (tmp_path / "b.bin").read_bytes() == b"\x00\x01"

    @pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
    def test_new_file_gets_the_usual_permissions(self, tmp_path):
        # A plain open() honours the umask; the temporary file must not stay 0600,
        # or a report saved to a shared folder is unreadable by colleagues.
        umask = os.umask(0o022)
        try:
            write_atomic(tmp_path / "r.html", "x")
        finally:
            os.umask(umask)
        assert stat.S_IMODE(os.stat(tmp_path / "r.html").st_mode) == 0o644

    @pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
    def test_replacing_keeps_the_old_permissions(self, tmp_path):
        target = tmp_path / "a.json"
        target.write_text("old")
        os.chmod(target, 0o640)
        write_atomic(target, "new")
        assert target.read_text() == "new"
        assert stat.S_IMODE(os.stat(target).st_mode) == 0o640

    def test_failure_leaves_old_file_and_no_temporary(self, tmp_path, monkeypatch):
        target = tmp_path / "a.json"
        target.write_bytes(b"old contents")

        def broken_replace(source, destination):
            raise OSError("disk unplugged")

        monkeypatch.setattr(os, "replace", broken_replace)
        with pytest.raises(OSError, match="disk unplugged"):
            write_atomic(target, "new contents")
        assert target.read_bytes() == b"old contents"
        assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"]

    def test_missing_folder_names_the_target(self, tmp_path):
        target = tmp_path / "no" / "such" / "r.html"
        with pytest.raises(FileNotFoundError) as caught:
            write_atomic(target, "x")
        assert caught.value.filename == str(target)

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


def _leftovers(folder) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".firstorder-tmp") or ".firstorder-" in p.name)


@pytest.mark.skipif(os.name != "posix", reason="POSIX links, devices and FIFOs")
class TestWhatTheNameIs:
    def test_symlink_stays_a_link_and_its_target_gets_the_text(self, tmp_path):
        real = tmp_path / "real.json"
        real.write_text("old analysis")
        link = tmp_path / "link.json"
        link.symlink_to(real)
        write_atomic(link, "new analysis")
        assert link.is_symlink()
        assert real.read_text() == "new analysis"
        assert _leftovers(tmp_path) == []

    def test_symlink_into_another_folder_writes_beside_the_target(self, tmp_path):
        (tmp_path / "data").mkdir()
        (tmp_path / "links").mkdir()
        real = tmp_path / "data" / "a.json"
        real.write_text("old")
        (tmp_path / "links" / "a.json").symlink_to(real)
        write_atomic(tmp_path / "links" / "a.json", "new")
        assert real.read_text() == "new" and (tmp_path / "links" / "a.json").is_symlink()

    @pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0, reason="mknod needs root")
    def test_character_device_is_written_not_replaced(self, tmp_path):
        # A device of our own (the null device's numbers), never the system's /dev/null:
        # a regression must not break the machine it runs on.
        device = tmp_path / "null"
        os.mknod(device, stat.S_IFCHR | 0o666, os.makedev(1, 3))
        before = os.stat(device)
        write_atomic(device, "anything")
        after = os.stat(device)
        assert stat.S_ISCHR(after.st_mode) and after.st_rdev == before.st_rdev and after.st_ino == before.st_ino
        assert _leftovers(tmp_path) == []

    def test_fifo_is_written_not_replaced(self, tmp_path):
        import threading

        fifo = tmp_path / "pipe"
        os.mkfifo(fifo)
        received = []
        reader = threading.Thread(target=lambda: received.append(open(fifo, "rb").read()))
        reader.start()
        write_atomic(fifo, "through the pipe")
        reader.join(timeout=10)
        assert received == [b"through the pipe"]
        assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
        assert _leftovers(tmp_path) == []

    def test_dev_stdout_is_written_and_stays_a_link(self, tmp_path):
        import subprocess
        import sys

        # A link of our own like /dev/stdout (to /proc/self/fd/1), not the system's.
        link = tmp_path / "stdout"
        link.symlink_to("/proc/self/fd/1")
        code = f"from firstorder.io.atomic import write_atomic; write_atomic({str(link)!r}, 'to stdout\\n')"
        result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
        assert result.returncode == 0, result.stderr
        assert result.stdout == "to stdout\n"
        assert link.is_symlink() and os.readlink(link) == "/proc/self/fd/1"

    def test_read_only_file_is_refused_even_for_root(self, tmp_path):
        target = tmp_path / "kept.json"
        target.write_text("keep me")
        os.chmod(target, 0o444)
        with pytest.raises(PermissionError) as caught:
            write_atomic(target, "overwritten")
        assert caught.value.filename == str(target)
        assert "read-only" in str(caught.value) and "0444" in str(caught.value)
        assert target.read_text() == "keep me"
        assert _leftovers(tmp_path) == []

    def test_folder_is_named_and_said_to_be_a_folder(self, tmp_path):
        with pytest.raises(IsADirectoryError) as caught:
            write_atomic(tmp_path, "x")
        assert caught.value.filename == str(tmp_path)
        assert "is a folder" in str(caught.value)
        assert ".firstorder" not in str(caught.value)
        assert _leftovers(tmp_path.parent) == []


class TestFullDisk:
    def test_full_disk_names_the_file_and_says_the_disk_is_full(self, tmp_path, monkeypatch):
        import errno

        target = tmp_path / "a.json"
        target.write_text("old")

        def full(handle, data):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

        monkeypatch.setattr(os, "write", full)
        with pytest.raises(OSError) as caught:
            write_atomic(target, "new")
        assert caught.value.filename == str(target)
        assert "disk is full" in str(caught.value)
        assert target.read_text() == "old"
        assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"]


_KILLED_SAVE = """
import os, sys
from firstorder.io import atomic
real_fsync = atomic.os.fsync
def stop(handle):  # the temporary is written: say so, then wait to be killed
    sys.stdout.write("ready\\n"); sys.stdout.flush()
    import time; time.sleep(120)
atomic.os.fsync = stop
atomic.write_atomic(sys.argv[1], "x" * 100_000)
"""


class TestKilledSave:
    def test_save_after_a_killed_save_leaves_no_temporary(self, tmp_path):
        import signal
        import subprocess
        import sys

        target = tmp_path / "a.json"
        target.write_text("old")
        child = subprocess.Popen([sys.executable, "-c", _KILLED_SAVE, str(target)], stdout=subprocess.PIPE, text=True)
        assert child.stdout.readline() == "ready\n"
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
        child.stdout.close()
        stale = _leftovers(tmp_path)
        assert len(stale) == 1, stale  # the killed save left its temporary
        assert target.read_text() == "old"
        write_atomic(target, "new")
        assert target.read_text() == "new"
        assert _leftovers(tmp_path) == []

    def test_temporaries_of_a_running_save_are_left_alone(self, tmp_path):
        target = tmp_path / "a.json"
        busy = tmp_path / f".a.json.{os.getppid()}-0000abcd.firstorder-tmp"  # the parent runs
        busy.write_text("in progress")
        other = tmp_path / ".b.json.999999999-0000abcd.firstorder-tmp"  # another file's
        other.write_text("not ours")
        write_atomic(target, "new")
        assert busy.exists() and other.exists()

"""What every written file does when the target is not a plain file: a named pipe is written through (its
reader gets the bytes), a symlink is followed (the target replaced, the link kept), anything else that is
not a regular file is refused with one line (exit 2). Temporary folders only, never a real device."""

from __future__ import annotations

import os
import socket
import stat
import threading
from pathlib import Path

import pytest
from kinetab.generator import outputs
from kinetab.generator.errors import UserError

import kinetab
from tests.helpers import DEMO_PATH


def _reader(path, into: list) -> threading.Thread:
    def read() -> None:
        with open(path, "rb") as fh:
            into.append(fh.read())

    t = threading.Thread(target=read, daemon=True)
    t.start()
    return t


def test_a_named_pipe_is_written_through_and_stays_a_pipe(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    got: list = []
    reader = _reader(fifo, got)
    outputs.write_file(fifo, "one\ntwo\n")
    reader.join(10)
    assert got == [b"one\ntwo\n"] and stat.S_ISFIFO(fifo.stat().st_mode)


def test_a_symlink_is_followed_and_kept(tmp_path):
    target, link = tmp_path / "real.csv", tmp_path / "link.csv"
    target.write_text("old\n")
    link.symlink_to(target)
    outputs.write_set({link: "new\n", tmp_path / "other.txt": "x"})
    assert link.is_symlink() and os.readlink(link) == str(target) and target.read_text() == "new\n"


def test_a_socket_is_refused_with_one_line_and_nothing_written(tmp_path):
    sock_path = tmp_path / "sock"
    with socket.socket(socket.AF_UNIX) as s:
        s.bind(str(sock_path))
        with pytest.raises(UserError) as err:
            outputs.write_set({tmp_path / "a.txt": "a", sock_path: "b"})
    assert "not a regular file" in str(err.value) and "\n" not in str(err.value)
    assert not (tmp_path / "a.txt").exists()


def test_build_vectors_into_a_pipe_through_the_command_line(tmp_path, capsys):
    """`kinetab build --vectors PIPE`: the pipe's reader gets the same bytes a regular file would hold;
    the pipe stays a pipe (before: it was replaced by a regular file and its reader got nothing)."""
    fifo = tmp_path / "vectors"
    os.mkfifo(fifo)
    got: list = []
    reader = _reader(fifo, got)
    kinetab.main(["build", str(DEMO_PATH), "-o", str(tmp_path / "fw"), "--vectors", str(fifo)])
    reader.join(30)
    kinetab.main(["build", str(DEMO_PATH), "-o", str(tmp_path / "fw2"), "--vectors", str(tmp_path / "plain.csv")])
    capsys.readouterr()
    assert got == [(tmp_path / "plain.csv").read_bytes()] and len(got[0]) > 1000
    assert stat.S_ISFIFO(fifo.stat().st_mode)


def test_a_failed_write_names_the_file_asked_for_not_its_temporary():
    """/proc takes no new files (Linux procfs, common knowledge): the error names the target, never the
    hidden temporary file the atomic write makes beside it."""
    target = Path("/proc/kinetab-never.toml")
    with pytest.raises(UserError) as err:
        outputs.write_file(target, "x = 1\n")
    assert str(err.value).startswith(f"{target}: cannot write (") and ".tmp" not in str(err.value)

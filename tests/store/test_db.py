"""The state folder must be on a local filesystem: SQLite's WAL mode needs shared memory."""

from __future__ import annotations

from pathlib import Path

import pytest

from watcher.errors import StoreError
from watcher.store import db

# The example line of proc(5), section /proc/pid/mountinfo (man-pages project).
PROC5_EXAMPLE = "36 35 98:0 /mnt1 /mnt2 rw,noatime master:1 - ext3 /dev/root rw,errors=continue"


def test_mountinfo_line_as_proc5_documents_it() -> None:
    assert db.mount_fs_type(PROC5_EXAMPLE, Path("/mnt2")) == "ext3"
    assert db.mount_fs_type(PROC5_EXAMPLE, Path("/mnt2/state")) == "ext3"
    assert db.mount_fs_type(PROC5_EXAMPLE, Path("/mnt20")) is None  # a prefix is not inside


def test_longest_mount_point_wins_and_escaped_spaces_are_read() -> None:
    text = "\n".join(
        [
            "22 1 8:1 / / rw,relatime shared:1 - ext4 /dev/sda1 rw",
            r"40 22 0:45 / /srv/lab\040share rw shared:20 - nfs4 nas:/export rw,vers=4.2",
            "41 22 0:46 / /srv/cifs rw - cifs //nas/qc rw",
            "42 22 0:47 / /home/op/remote rw - fuse.sshfs op@nas: rw",
        ]
    )
    assert db.mount_fs_type(text, Path("/srv/lab share/state")) == "nfs4"
    assert db.mount_fs_type(text, Path("/srv/cifs/x")) == "cifs"
    assert db.mount_fs_type(text, Path("/var/lib/ionwarden")) == "ext4"
    assert db.is_network_fs("nfs4")
    assert db.is_network_fs("cifs")
    assert db.is_network_fs("fuse.sshfs")
    assert not db.is_network_fs("ext4")


def test_this_machines_tmp_is_local_and_accepted(tmp_path: Path) -> None:
    """The real /proc/self/mountinfo: the test's own folder is not a network mount."""
    assert not db.is_network_fs(db.filesystem_type(tmp_path))
    db.connect(tmp_path / "state", daemon=True).close()


def test_state_dir_on_a_network_mount_is_refused_naming_it(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A mount table (a real file, in proc(5) format) that puts the folder on NFS: refused."""
    share = tmp_path / "share"
    share.mkdir()
    table = tmp_path / "mountinfo"
    table.write_text(
        "22 1 8:1 / / rw,relatime shared:1 - ext4 /dev/sda1 rw\n"
        f"40 22 0:45 / {share} rw shared:20 - nfs4 nas:/export rw,vers=4.2\n"
    )
    monkeypatch.setattr(db, "MOUNTINFO", table)
    with pytest.raises(StoreError, match=r"state_dir .*share/state is on a network filesystem"):
        db.connect(share / "state", daemon=True)
    assert not (share / "state" / db.DB_NAME).exists()  # nothing created there
    db.connect(tmp_path / "local", daemon=True).close()  # beside the share it is fine

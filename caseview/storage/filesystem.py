"""Where a workspace file lives: detect network file systems where SQLite locking is unreliable.

SQLite's documentation ("How To Corrupt An SQLite Database File", section 2.1, and the WAL page)
warns that file locking on network file systems is often broken and that WAL mode needs shared
memory on one host, so a workspace on such a share can be corrupted by two users at once.
On Linux the file system type of the path's mount point is read from /proc/mounts.
"""

from __future__ import annotations

import os
from pathlib import Path

NETWORK_FS_TYPES = frozenset({
    "nfs", "nfs4", "cifs", "smb", "smbfs", "smb3", "ncpfs", "afs", "9p", "ceph", "glusterfs", "lustre",
    "gpfs", "ocfs2", "gfs2", "davfs", "fuse.sshfs", "fuse.rclone", "fuse.s3fs", "fuse.gcsfuse",
    "fuse.glusterfs", "fuse.cephfs", "fuse.davfs2", "fuse.smbnetfs", "vboxsf", "prl_fs", "fuse.vmhgfs-fuse",
})


def _unescape(field: str) -> str:
    # /proc/mounts escapes space, tab, newline and backslash as octal (\040 ...)
    return field.replace("\\040", " ").replace("\\011", "\t").replace("\\012", "\n").replace("\\134", "\\")


def mount_type(path, mounts_text: str | None = None) -> str | None:
    """File system type of the mount point holding ``path`` (None when unknown)."""
    if mounts_text is None:
        try:
            mounts_text = Path("/proc/mounts").read_text(encoding="utf-8", errors="replace")
        except OSError:
            return None
    target = os.path.realpath(os.path.abspath(path))
    best, best_type = "", None
    for line in mounts_text.splitlines():
        parts = line.split()
        if len(parts) < 3:
            continue
        point = _unescape(parts[1])
        prefix = point.rstrip("/") + "/"
        if (target == point or target.startswith(prefix) or point == "/") and len(point) >= len(best):
            best, best_type = point, parts[2]
    return best_type


def network_warning(path, mounts_text: str | None = None) -> str | None:
    """A warning text when ``path`` is on a network file system, else None."""
    fs = mount_type(Path(path).parent if not Path(path).is_dir() else path, mounts_text)
    if fs and (fs in NETWORK_FS_TYPES or fs.split(".")[0] in {"nfs", "cifs", "smb3"}):
        return (f"workspace {path} is on a network file system ({fs}); SQLite locking is unreliable there and two "
                "people using it at once can corrupt it - keep the workspace on a local disk and share backups")
    return None

import os
import sys
import tempfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))


@pytest.fixture
def write(tmp_path):
    """Write a text file under tmp_path and return its path."""
    def _write(name: str, text: str) -> Path:
        p = tmp_path / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text, encoding="utf-8")
        return p
    return _write


RAM_NEEDED = 2 * 1024 ** 3      # bytes free on the tmpfs: the suite writes far less


def _ram_folder() -> Path | None:
    """/dev/shm when it is a writable tmpfs (Linux) with RAM_NEEDED free (a container's
    default /dev/shm is 64 MB), else None."""
    shm = Path("/dev/shm")
    try:
        mounts = Path("/proc/mounts").read_text(encoding="utf-8").splitlines()
    except OSError:
        return None
    if not any(m.split()[1:3] == [str(shm), "tmpfs"] for m in mounts if len(m.split()) > 2):
        return None
    if not os.access(shm, os.W_OK):
        return None
    stat = os.statvfs(shm)
    return shm if stat.f_bavail * stat.f_frsize >= RAM_NEEDED else None


def pytest_configure(config):
    """Temporary folders in memory: pytest's tmp_path, tempfile and every subprocess
    (Snakemake and its jobs inherit TMPDIR) use /dev/shm when it is a tmpfs and the
    caller set no TMPDIR. Every file kinset writes is fsync'ed (kinset.io.output); on a
    tmpfs that returns at once, on a disk it waits for the device, which was seconds per
    history in tests/test_allocation.py. Nothing a test checks depends on the folder."""
    if os.environ.get("TMPDIR") or config.option.basetemp:
        return
    ram = _ram_folder()
    if ram is None:
        return
    folder = ram / f"kinset-tests-{os.getuid()}"
    folder.mkdir(mode=0o700, exist_ok=True)
    os.environ["TMPDIR"] = str(folder)
    tempfile.tempdir = str(folder)

"""What memory touched for the first time costs on this machine, and what that does to a large
temporary file written through the page cache or around it (``O_DIRECT``).

On some virtual machines the host takes back memory the guest has freed (free page
reporting) and hands it over again, zeroed, on the next first touch; the guest then pays for
every fresh page in CPU time. nutricap's raster path writes a temporary per-cell file of
28 bytes per cell (1.1 GB at 4e7 cells), so on such a machine a write through the page cache
costs that price for the whole file (benchmarks/README.md, sixth session). This script
measures the two things that decided the cell cache's design:

1. **touch**: fill 1 GB of freshly mapped memory, right after freeing another 1 GB and after
   waiting 1 and 5 s (wall and CPU seconds of this process, user + system);
2. **write**: write a file of ``--gb`` GB in 4 MiB blocks from one reused buffer (no fsync, as
   the estimate), through the page cache and with ``O_DIRECT`` (where the file system accepts
   it), then read it back the same way; the file is in ``TMPDIR`` and removed.

    .venv/bin/python benchmarks/fresh_memory.py --gb 1.1
"""

from __future__ import annotations

import argparse
import mmap
import os
import resource
import tempfile
import time

import numpy as np

BLOCK_BYTES = 4 * 1024 * 1024
GB = 1e9


def cpu_seconds() -> float:
    """User + system CPU seconds of this process so far."""
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def timed(action) -> tuple[float, float]:
    """(wall s, CPU s) of ``action()``."""
    wall, cpu = time.perf_counter(), cpu_seconds()
    action()
    return time.perf_counter() - wall, cpu_seconds() - cpu


def touch_after(wait_s: float, size_bytes: int) -> tuple[float, float]:
    """Free ``size_bytes`` of touched memory, wait, then fill as much freshly mapped memory."""
    used = mmap.mmap(-1, size_bytes)
    np.frombuffer(used, np.uint8)[:] = 1
    used.close()  # returned to the kernel (munmap)
    time.sleep(wait_s)
    fresh = mmap.mmap(-1, size_bytes)
    try:
        return timed(lambda: np.frombuffer(fresh, np.uint8).__setitem__(slice(None), 1))
    finally:
        fresh.close()


def write_file(path: str, total_bytes: int, direct: bool) -> tuple[float, float]:
    """Write ``total_bytes`` in blocks from one page-aligned buffer; (wall s, CPU s)."""
    buffer = mmap.mmap(-1, BLOCK_BYTES)  # page-aligned, as O_DIRECT needs
    np.frombuffer(buffer, np.uint8)[:] = 7
    flags = os.O_WRONLY | os.O_CREAT | os.O_TRUNC | (os.O_DIRECT if direct else 0)
    handle = os.open(path, flags, 0o600)

    def write_all() -> None:
        for offset in range(0, total_bytes, BLOCK_BYTES):
            os.pwrite(handle, buffer, offset)  # no fsync: as the estimate, which never waits

    try:
        return timed(write_all)
    finally:
        os.close(handle)
        buffer.close()


def read_file(path: str, total_bytes: int, direct: bool) -> tuple[float, float]:
    """Read the file back into one reused page-aligned buffer; (wall s, CPU s)."""
    buffer = mmap.mmap(-1, BLOCK_BYTES)
    handle = os.open(path, os.O_RDONLY | (os.O_DIRECT if direct else 0))

    def read_all() -> None:
        for offset in range(0, total_bytes, BLOCK_BYTES):
            os.preadv(handle, [buffer], offset)

    try:
        return timed(read_all)
    finally:
        os.close(handle)
        buffer.close()


def direct_io_works(folder: str) -> bool:
    """Whether the file system of ``folder`` accepts an O_DIRECT write."""
    with tempfile.NamedTemporaryFile(dir=folder) as probe:
        try:
            write_file(probe.name, BLOCK_BYTES, direct=True)
        except OSError:
            return False
    return True


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gb", type=float, default=1.1, help="size of the file written")
    args = parser.parse_args()
    total = int(args.gb * GB) // BLOCK_BYTES * BLOCK_BYTES
    print(f"load={os.getloadavg()[0]:.2f} cpus={os.cpu_count()}")
    for wait_s in (0.0, 1.0, 5.0):
        wall, cpu = touch_after(wait_s, int(GB))
        print(f"touch 1 GB after {wait_s:.0f} s free: wall {wall:.2f} s, CPU {cpu:.2f} s")
    folder = tempfile.gettempdir()
    modes = [False, True] if direct_io_works(folder) else [False]
    for direct in modes:
        name = "O_DIRECT" if direct else "page cache"
        handle, path = tempfile.mkstemp(dir=folder, suffix=".bench")
        os.close(handle)
        try:
            time.sleep(5.0)  # the file's pages (if cached) come from memory freed a while ago
            wall, cpu = write_file(path, total, direct)
            print(f"write {total / GB:.2f} GB, {name}: wall {wall:.2f} s, CPU {cpu:.2f} s")
            wall, cpu = read_file(path, total, direct)
            print(f"read  {total / GB:.2f} GB, {name}: wall {wall:.2f} s, CPU {cpu:.2f} s")
        finally:
            os.unlink(path)


if __name__ == "__main__":
    main()

"""The memory probe (fockmill.problem.memory) against fake cgroup trees and a real
address-space limit.

File names and meanings follow the Linux kernel's cgroup documentation (from memory):
cgroup v2 (Documentation/admin-guide/cgroup-v2.rst) has ``memory.max`` ("max" when
unlimited), ``memory.current`` and ``inactive_file`` in ``memory.stat``; cgroup v1
(Documentation/admin-guide/cgroup-v1/memory.rst) has ``memory.limit_in_bytes`` (about
2^63 when unlimited), ``memory.usage_in_bytes`` and ``total_inactive_file``;
``/proc/self/cgroup`` lists ``hierarchy:controllers:path`` (``0::path`` for v2).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from fockmill.problem.memory import _address_space_room, _cgroup_room, available_memory

GIB = 2**30
MIB = 2**20


def write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)


def v2_group(directory: Path, limit: str, current: int, inactive: int) -> None:
    write(directory / "memory.max", limit + "\n")
    write(directory / "memory.current", f"{current}\n")
    write(directory / "memory.stat", f"anon 1234\ninactive_file {inactive}\nactive_file 99\n")


def v1_group(directory: Path, limit: int, usage: int, inactive: int) -> None:
    write(directory / "memory.limit_in_bytes", f"{limit}\n")
    write(directory / "memory.usage_in_bytes", f"{usage}\n")
    write(directory / "memory.stat", f"cache 5\ntotal_inactive_file {inactive}\n")


def test_cgroup_v2_own_group_and_ancestors(tmp_path: Path) -> None:
    root = tmp_path / "cgroup"
    v2_group(root, "max", 10 * GIB, 0)  # the root: no limit
    v2_group(root / "batch.slice", str(4 * GIB), GIB, 0)  # room 3 GiB
    v2_group(root / "batch.slice" / "job7", str(2 * GIB), GIB, 256 * MIB)  # room 1.25 GiB
    membership = tmp_path / "cgroup-list"
    write(membership, "0::/batch.slice/job7\n")
    # Page cache that can be dropped (inactive files) counts as free.
    assert _cgroup_room(root, membership) == 2 * GIB - (GIB - 256 * MIB)
    # The tighter ancestor wins once the job's own limit is lifted.
    v2_group(root / "batch.slice" / "job7", "max", GIB, 0)
    assert _cgroup_room(root, membership) == 3 * GIB


def test_cgroup_v1_memory_controller(tmp_path: Path) -> None:
    root = tmp_path / "cgroup"
    unlimited = 9223372036854771712  # 2^63 rounded down to a page: v1's "no limit"
    v1_group(root / "memory", unlimited, 5 * GIB, 0)
    v1_group(root / "memory" / "slurm" / "job42", 3 * GIB, GIB, 512 * MIB)
    membership = tmp_path / "cgroup-list"
    write(membership, "12:cpu,cpuacct:/slurm/job42\n4:memory:/slurm/job42\n1:name=systemd:/x\n")
    assert _cgroup_room(root, membership) == 3 * GIB - (GIB - 512 * MIB)


def test_cgroup_usage_above_limit_leaves_no_room(tmp_path: Path) -> None:
    root = tmp_path / "cgroup"
    v2_group(root / "job", str(GIB), 2 * GIB, 0)
    membership = tmp_path / "cgroup-list"
    write(membership, "0::/job\n")
    assert _cgroup_room(root, membership) == 0


def test_no_cgroup_limit_reads_as_unknown(tmp_path: Path) -> None:
    root = tmp_path / "cgroup"
    v2_group(root, "max", GIB, 0)
    membership = tmp_path / "cgroup-list"
    write(membership, "0::/\n")
    assert _cgroup_room(root, membership) is None
    assert _cgroup_room(tmp_path / "absent", tmp_path / "absent-list") is None


ADDRESS_SPACE = textwrap.dedent(
    """
    import resource, sys
    from pathlib import Path
    limit = 3 * 2**30
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    from fockmill.problem.memory import _address_space_room, available_memory
    status = Path(sys.argv[1])
    status.write_text("Name:\\tpython\\nVmPeak:\\t 2000000 kB\\nVmSize:\\t 1048576 kB\\n")
    print(_address_space_room(status), available_memory(), limit)
    """
)


@pytest.mark.skipif(sys.platform != "linux", reason="RLIMIT_AS and /proc are Linux")
def test_address_space_limit(tmp_path: Path) -> None:
    child = subprocess.run(
        [sys.executable, "-c", ADDRESS_SPACE, str(tmp_path / "status")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert child.returncode == 0, child.stderr
    room, available, limit = (int(x) for x in child.stdout.split())
    assert room == limit - GIB  # the limit minus VmSize (1 GiB in the fake status)
    assert available <= limit  # the real probe honours the limit too


def test_no_address_space_limit_reads_as_unknown() -> None:
    import resource

    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft != resource.RLIM_INFINITY:
        pytest.skip("this test process runs under an address-space limit")
    assert _address_space_room() is None
    assert available_memory() is None or available_memory() > 0

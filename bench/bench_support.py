"""What the Python benchmarks under bench/ share: free loopback ports, a process's memory,
a directory's size on disk.

A script in bench/system or bench/quality imports it with
    sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
    import bench_support
"""
import os
import socket


def free_port():
    """A loopback TCP port free at the time of the call (the kernel's pick)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def memory_mb(pid):
    """(resident, peak resident) memory of process `pid` in MB (VmRSS, VmHWM; 0 if absent)."""
    out = {}
    with open("/proc/%d/status" % pid) as f:
        for line in f:
            if line.startswith(("VmRSS:", "VmHWM:")):
                out[line.split(":")[0]] = int(line.split()[1]) / 1024.0
    return out.get("VmRSS", 0.0), out.get("VmHWM", 0.0)


def dir_bytes(path, suffix=""):
    """Bytes of the files under `path` whose names end with `suffix` (files that vanish while
    it walks are skipped)."""
    total = 0
    for root, _, files in os.walk(path):
        for f in files:
            if not f.endswith(suffix):
                continue
            try:
                total += os.path.getsize(os.path.join(root, f))
            except OSError:
                pass
    return total

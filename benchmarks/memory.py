"""Resident-memory readings on Linux (``/proc/self``), shared by the benchmarks and the out-of-core test."""

from __future__ import annotations


def status(field: str) -> int:
    """A ``/proc/self/status`` field in bytes (``VmRSS`` now, ``VmHWM`` the peak since the last reset)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(field + ":"):
                return int(line.split()[1]) * 1024
    raise OSError(f"{field} not in /proc/self/status")


def reset_peak() -> int | None:
    """Reset the kernel's peak-RSS mark and return the current RSS in bytes; None where unsupported."""
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return status("VmRSS")
    except OSError:
        return None

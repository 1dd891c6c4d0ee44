"""Private: what this machine can hold.  It never picks a mode; it only refuses what will not fit."""

from __future__ import annotations

import os

from vibsynth.errors import InputError


def machine_memory_bytes() -> float:
    """Physical memory of this machine in bytes (POSIX sysconf); 64 GiB where it cannot be read."""
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        return float(64 * 2**30)


def check_machine_holds(needed_bytes: int, total_samples: int, rate_hz: float, needs_periodic: bool) -> None:
    """Refuse a periodic record that needs more than half this machine's memory (an InputError, not a mode switch).

    The mode is chosen from the options alone, so the same options give the same
    samples whatever the memory; a machine too small for them says so.
    """
    available = machine_memory_bytes() / 2
    if needed_bytes <= available:
        return
    per_sample = needed_bytes / max(total_samples, 1)
    longest_s = int(available // per_sample) / rate_hz
    remedy = (f"give at most {longest_s:.6g} s" if needs_periodic
              else f"give at most {longest_s:.6g} s or a memory_budget_bytes below {available / 2**20:.0f} MB "
              "(overlap-add, other samples)")
    raise InputError(
        f"the periodic record of {total_samples} samples needs about {needed_bytes / 2**20:.0f} MB, more than half "
        f"of this machine's {2 * available / 2**20:.0f} MB memory; {remedy}",
        "memory_budget_bytes",
    )

"""The machine's limits: cores, memory, and the worker processes lintext starts.

A request that cannot fit is refused before anything is allocated: :func:`require_memory`
compares an estimate with the memory available (``MemAvailable`` of ``/proc/meminfo``,
lowered by an address-space limit if one is set, and by ``LINTEXT_MEMORY_LIMIT`` — a number
of bytes, or with a suffix such as ``512M`` or ``8G`` — which tests and cautious users set).
Process counts are capped at the cores this process may run on (:func:`usable_cores`).
"""

from __future__ import annotations

import contextlib
import os
import sys

from .errors import ConfigError

MEMORY_LIMIT_VARIABLE = "LINTEXT_MEMORY_LIMIT"
_SUFFIXES = {"": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40}


def usable_cores() -> int:
    """Cores this process may use (CPU affinity and container quotas included)."""
    try:
        from joblib import cpu_count

        return max(1, int(cpu_count()))
    except Exception:  # joblib missing or failing: the affinity mask alone
        return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))


def capped_processes(requested: int | None, cap: int | None = None) -> int:
    """``requested`` processes (0, -1 or None: one per core), never more than the cores (or ``cap``)."""
    cores = usable_cores()
    count = cores if requested in (None, 0, -1) else int(requested)
    return max(1, min(count, cores, cap if cap is not None else count))


def available_memory() -> int | None:
    """Bytes this process can still allocate, as well as can be told; None when unknown."""
    limits = []
    override = os.environ.get(MEMORY_LIMIT_VARIABLE, "").strip()
    if override:
        limits.append(parse_size(override, MEMORY_LIMIT_VARIABLE))
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    limits.append(int(line.split()[1]) * 1024)
                    break
    except (OSError, ValueError, IndexError):
        pass
    with contextlib.suppress(ImportError, ValueError, OSError):
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft not in (resource.RLIM_INFINITY, -1) and soft > 0:
            limits.append(max(0, soft - _resident_bytes()))
    return min(limits) if limits else None


def _resident_bytes() -> int:
    try:
        with open("/proc/self/statm", encoding="ascii") as fh:
            return int(fh.read().split()[0]) * os.sysconf("SC_PAGE_SIZE")
    except (OSError, ValueError, IndexError):
        return 0


def parse_size(text: str, option: str) -> int:
    """``"512M"`` -> 536870912; a plain number is bytes."""
    value = str(text).strip().upper().removesuffix("B").removesuffix("I")
    unit = value[-1:] if value[-1:] in _SUFFIXES and value[-1:] else ""
    try:
        number = float(value[: len(value) - len(unit)] if unit else value)
    except ValueError:
        raise ConfigError(option, text, "expected a size such as 4G, 512M or a number of bytes") from None
    if not number >= 0:
        raise ConfigError(option, text, "expected a size such as 4G, 512M or a number of bytes")
    return int(number * _SUFFIXES[unit])


def size_text(n_bytes: float) -> str:
    """``1536`` -> ``"1.5 KiB"``: bytes in binary units, three significant figures."""
    value, unit = float(n_bytes), "bytes"
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if value < 1024 or unit == "PiB":
            break
        value /= 1024
    return f"{value:.0f} bytes" if unit == "bytes" else f"{value:.3g} {unit}"


def memory_shortfall(n_bytes: float) -> int | None:
    """The memory available when it is less than ``n_bytes``, else None (also when it cannot be told)."""
    available = available_memory()
    return available if available is not None and n_bytes > available else None


def require_memory(n_bytes: float, what: str, option: str, value, advice: str) -> None:
    """Refuse (ConfigError naming ``option``) when ``n_bytes`` exceed the memory available.

    ``what`` says what needs the memory; ``advice`` what to change. Nothing is checked when
    the available memory cannot be told.
    """
    available = memory_shortfall(n_bytes)
    if available is not None:
        raise ConfigError(option, value, f"{what} needs about {size_text(n_bytes)} but {size_text(available)} "
                                         f"of memory is available; {advice}")


def stop_worker_processes() -> None:
    """Stop joblib's worker processes (loky), if any were started.

    Idle workers otherwise wait for minutes before they exit, holding the caller's output
    pipes; after a failure or a signal, busy ones would run on.
    """
    module = sys.modules.get("joblib.externals.loky.reusable_executor")
    executor = getattr(module, "_executor", None)
    if executor is not None:
        with contextlib.suppress(Exception):
            executor.shutdown(wait=True, kill_workers=True)

"""A start-up choice for NumPy's sorting on AMD Zen 4 processors.

NumPy dispatches np.sort/np.argsort/np.partition to AVX-512 code where the processor has AVX-512.
On AMD family 19h processors with AVX-512 (Zen 4) that code is slow: its partition step stores
with a compress instruction these cores run in microcode. Measured on this project's 2-core bench
machine (numpy 2.4): argsort of 43,200 doubles 46.6 ns an element with the AVX-512 code, 16.5 ns
with AVX-512 dispatch off (the AVX2 code); np.sort 37.0 vs 6.0 ns. Ranks (Spearman), quantiles
and medians all sort, so `warehouse` asks NumPy to leave its AVX-512 targets out there.

NumPy reads the choice once, when it is first imported, from NPY_DISABLE_CPU_FEATURES. Nothing is
changed when that variable is already set (set it, even empty, to keep NumPy's own choice), when
NumPy is already imported, on other processors, or on NumPy before 2.4 (whose feature names
differ and are not tested here).
"""
from __future__ import annotations

import sys
from collections.abc import MutableMapping
from importlib import metadata

VARIABLE = "NPY_DISABLE_CPU_FEATURES"
AVX512_TARGETS = "X86_V4 AVX512_ICL AVX512_SPR"   # numpy >= 2.4's names for its AVX-512 targets


def is_zen4(cpuinfo: str) -> bool:
    """AMD, family 25 (19h), with AVX-512: the first CPU block of /proc/cpuinfo decides."""
    fields: dict[str, str] = {}
    for line in cpuinfo.splitlines():
        if not line.strip():
            if fields:
                break
            continue
        key, _, value = line.partition(":")
        fields.setdefault(key.strip(), value.strip())
    return (fields.get("vendor_id") == "AuthenticAMD" and fields.get("cpu family") == "25"
            and "avx512f" in fields.get("flags", "").split())


def _numpy_at_least(major: int, minor: int) -> bool:
    try:
        parts = metadata.version("numpy").split(".")
        return (int(parts[0]), int(parts[1])) >= (major, minor)
    except (metadata.PackageNotFoundError, ValueError, IndexError):
        return False


def prefer_avx2_sorting(environ: MutableMapping[str, str], cpuinfo_path: str = "/proc/cpuinfo") -> bool:
    """Set NPY_DISABLE_CPU_FEATURES for a Zen 4 processor before NumPy loads; True when set."""
    if VARIABLE in environ or "numpy" in sys.modules:
        return False
    try:
        with open(cpuinfo_path, encoding="utf-8", errors="replace") as f:
            info = f.read(1 << 16)
    except OSError:
        return False
    # the package metadata lookup costs more than reading the file: only on a Zen 4
    if not is_zen4(info) or not _numpy_at_least(2, 4):
        return False
    environ[VARIABLE] = AVX512_TARGETS
    return True

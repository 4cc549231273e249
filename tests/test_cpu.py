"""The start-up choice of NumPy's sort code on AMD Zen 4 (warehouse/_cpu.py)."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from warehouse import _cpu

FLAGS = "fpu vme sse4_2 avx avx2 fma"


def cpuinfo(vendor: str, family: int, flags: str) -> str:
    block = f"processor\t: {{}}\nvendor_id\t: {vendor}\ncpu family\t: {family}\nmodel\t\t: 17\nflags\t\t: {flags}\n"
    # a second processor block that would say otherwise must not matter: the first decides
    return block.format(0) + "\n" + block.format(1).replace(vendor, "Other") + "\n"


@pytest.mark.parametrize("vendor, family, flags, want", [
    ("AuthenticAMD", 25, FLAGS + " avx512f avx512dq avx512vl", True),    # Zen 4
    ("AuthenticAMD", 25, FLAGS, False),                                   # Zen 3: no AVX-512
    ("AuthenticAMD", 26, FLAGS + " avx512f avx512dq", False),             # Zen 5: fast compress
    ("GenuineIntel", 6, FLAGS + " avx512f avx512dq", False),              # AVX-512 sort is fast
])
def test_is_zen4(vendor: str, family: int, flags: str, want: bool) -> None:
    assert _cpu.is_zen4(cpuinfo(vendor, family, flags)) is want


def test_variable_set_only_where_it_helps_and_never_over_the_users(tmp_path: Path,
                                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    zen4 = tmp_path / "zen4"
    zen4.write_text(cpuinfo("AuthenticAMD", 25, FLAGS + " avx512f"))
    intel = tmp_path / "intel"
    intel.write_text(cpuinfo("GenuineIntel", 6, FLAGS + " avx512f"))
    import numpy  # noqa: F401  (once numpy is loaded, nothing may change: it would be too late)

    env: dict[str, str] = {}
    assert not _cpu.prefer_avx2_sorting(env, str(zen4)) and env == {}
    monkeypatch.delitem(sys.modules, "numpy")
    monkeypatch.setattr(_cpu, "_numpy_at_least", lambda major, minor: True)
    assert _cpu.prefer_avx2_sorting(env, str(zen4)) and env == {_cpu.VARIABLE: _cpu.AVX512_TARGETS}
    env = {_cpu.VARIABLE: ""}                              # the user's choice stands, even empty
    assert not _cpu.prefer_avx2_sorting(env, str(zen4)) and env == {_cpu.VARIABLE: ""}
    env = {}
    assert not _cpu.prefer_avx2_sorting(env, str(intel)) and env == {}
    assert not _cpu.prefer_avx2_sorting(env, str(tmp_path / "missing")) and env == {}
    monkeypatch.setattr(_cpu, "_numpy_at_least", lambda major, minor: False)
    assert not _cpu.prefer_avx2_sorting(env, str(zen4)) and env == {}


def test_a_fresh_process_on_this_machine_gets_the_choice() -> None:
    """On this machine: NumPy imported after warehouse runs without its AVX-512 targets exactly when
    the processor is a Zen 4 and numpy >= 2.4; its sorts still sort."""
    env = {k: v for k, v in os.environ.items() if k != _cpu.VARIABLE}
    code = ("import warehouse, numpy, io, contextlib\n"
            "buf = io.StringIO()\n"
            "with contextlib.redirect_stdout(buf):\n"
            "    numpy.show_runtime()\n"
            "x = numpy.random.default_rng(0).standard_normal(10_000)\n"
            "assert (numpy.diff(x[numpy.argsort(x)]) >= 0).all() and (numpy.diff(numpy.sort(x)) >= 0).all()\n"
            "print('X86_V4' in buf.getvalue().split('not_found')[-1])")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as f:
        expected = _cpu.is_zen4(f.read(1 << 16)) and _cpu._numpy_at_least(2, 4)
    assert out.stdout.strip().splitlines()[-1] == str(expected)

"""Unit rules and counter-path parsing in warehouse.ingest.names."""
from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from warehouse.ingest.model import CounterName
from warehouse.ingest.names import counter_from_header, parse_counter_path, split_unit


@pytest.mark.parametrize(("header", "expected"), [
    # bracketed suffix: cut off, becomes the unit
    ("cpu_util (%)", ("cpu_util", "%")),
    ("disk_read_latency (ms)", ("disk_read_latency", "ms")),
    ("Read [MB/s]", ("Read", "MB/s")),
    ("temp(°C)", ("temp", "°C")),
    ("  latency (µs)  ", ("latency", "µs")),
    # leading or embedded percent sign
    ("% Processor Time", ("% Processor Time", "%")),
    ("%user", ("%user", "%")),
    ("cpu%busy", ("cpu%busy", "%")),
    # rates
    ("Pages/sec", ("Pages/sec", "/s")),
    ("rxpck/s", ("rxpck/s", "/s")),
    ("Disk Read Bytes/sec", ("Disk Read Bytes/sec", "B/s")),
    ("Bytes Total/sec", ("Bytes Total/sec", "B/s")),
    ("MBytes/sec", ("MBytes/sec", "MB/s")),
    ("Read MB/s", ("Read MB/s", "MB/s")),
    # sizes
    ("Available MBytes", ("Available MBytes", "MB")),
    # seconds per operation
    ("Avg. Disk sec/Transfer", ("Avg. Disk sec/Transfer", "s")),
    ("Avg. Disk sec/Read", ("Avg. Disk sec/Read", "s")),
    ("Avg. Disk sec/Write", ("Avg. Disk sec/Write", "s")),
    # snake-case endings
    ("commit_latency_ms", ("commit_latency_ms", "ms")),
    ("mem_used_pct", ("mem_used_pct", "%")),
    ("read_iops", ("read_iops", "IO/s")),
    ("capacity_total_gb", ("capacity_total_gb", "GB")),
    ("mem_used_mb", ("mem_used_mb", "MB")),
    ("net2_in_kbps", ("net2_in_kbps", "kbit/s")),
    ("uplink_mbps", ("uplink_mbps", "Mbit/s")),
    ("net_rx_bytes", ("net_rx_bytes", "B")),
    # nothing to infer
    ("net_rx_bytes_total", ("net_rx_bytes_total", "")),
    ("Threads", ("Threads", "")),
    ("  Queue Length  ", ("Queue Length", "")),
])
def test_split_unit(header: str, expected: tuple[str, str]) -> None:
    assert split_unit(header) == expected


@pytest.mark.parametrize("header", [
    "Processor(_Total)",   # underscore: an instance, not a unit
    "disk (2)",            # a number is not a unit
    "link (eth0 vlan)",    # spaces: not a unit
    "(ms)",                # nothing left for the name
])
def test_split_unit_leaves_non_unit_brackets(header: str) -> None:
    assert split_unit(header)[0] == header.strip()


def test_split_unit_keeps_case_and_punctuation() -> None:
    assert split_unit("Avg. Disk Queue-Length, ALL") == ("Avg. Disk Queue-Length, ALL", "")


@pytest.mark.parametrize(("path", "expected"), [
    (r"\\HV01\Processor(_Total)\% Processor Time",
     CounterName("HV01", "Processor", "_Total", "% Processor Time", "%")),
    (r"\\HV01\PhysicalDisk(0 C:)\Avg. Disk sec/Transfer",
     CounterName("HV01", "PhysicalDisk", "0 C:", "Avg. Disk sec/Transfer", "s")),
    (r"\\vdi-hv01\Network Interface(eth0 (vlan 12))\Bytes Total/sec",
     CounterName("vdi-hv01", "Network Interface", "eth0 (vlan 12)", "Bytes Total/sec", "B/s")),
    (r"\\fs01\Share(a/b,c)\Open Files", CounterName("fs01", "Share", "a/b,c", "Open Files")),
    (r"\\fs01\Process(svc#1)\Working Set", CounterName("fs01", "Process", "svc#1", "Working Set")),
    (r"\\fs01\Memory\Available MBytes",
     CounterName("fs01", "Memory", "", "Available MBytes", "MB")),
    (r"\\fs01\Volume(\\?\Volume{1234})\Free Space",
     CounterName("fs01", "Volume", r"\\?\Volume{1234}", "Free Space")),
    (r"\\fs01\Cache\Latency (ms)", CounterName("fs01", "Cache", "", "Latency", "ms")),
    (r"  \\fs01\Memory\Pages/sec  ", CounterName("fs01", "Memory", "", "Pages/sec", "/s")),
])
def test_parse_counter_path(path: str, expected: CounterName) -> None:
    assert parse_counter_path(path) == expected


@pytest.mark.parametrize("text", [
    "timestamp", "cpu_util (%)", r"\HV01\Memory\Available MBytes", r"\\HV01", r"\\HV01\Memory",
    r"\\HV01\Memory\ ", r"\\\Memory\x", r"\\h(1)\Memory\x", r"\\h\(inst)\x", r"\\h\a\b\c",
    "(LOGGER-CSV 4.0) (W. Europe Standard Time)(-60)",
])
def test_parse_counter_path_rejects(text: str) -> None:
    assert parse_counter_path(text) is None


def test_counter_from_header() -> None:
    assert counter_from_header("disk_read_latency (ms)", host="fs01") == \
        CounterName("fs01", "", "", "disk_read_latency", "ms")
    assert counter_from_header(" Threads ") == CounterName("", "", "", "Threads", "")


def _text(alphabet: st.SearchStrategy[str], *, allow_empty: bool = False) -> st.SearchStrategy[str]:
    # Parts are stripped by the parser, so generate them already stripped.
    base = st.text(alphabet, min_size=0 if allow_empty else 1, max_size=20).map(str.strip)
    return base if allow_empty else base.filter(bool)


_PLAIN = st.characters(codec="utf-8", exclude_characters="\\(\r\n",
                       exclude_categories=("Cs", "Cc"))
_INSTANCE = st.one_of(
    st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")),
    st.sampled_from(list("(),/ #")),
)
_COUNTER = st.characters(codec="utf-8", exclude_characters="\\\r\n",
                         exclude_categories=("Cs", "Cc"))


@settings(max_examples=300)
@given(host=_text(_PLAIN), obj=_text(_PLAIN), instance=_text(_INSTANCE, allow_empty=True),
       counter=_text(_COUNTER))
def test_counter_path_round_trip(host: str, obj: str, instance: str, counter: str) -> None:
    parsed = parse_counter_path(f"\\\\{host}\\{obj}({instance})\\{counter}")
    assert parsed is not None
    assert (parsed.host, parsed.object, parsed.instance) == (host, obj, instance)
    assert (parsed.counter, parsed.unit) == split_unit(counter)


@given(host=_text(_PLAIN), obj=_text(_PLAIN), counter=_text(_COUNTER))
def test_counter_path_without_instance_round_trip(host: str, obj: str, counter: str) -> None:
    parsed = parse_counter_path(f"\\\\{host}\\{obj}\\{counter}")
    assert parsed is not None
    assert (parsed.host, parsed.object, parsed.instance) == (host, obj, "")
    assert (parsed.counter, parsed.unit) == split_unit(counter)

"""Counter names from CSV headers: unit suffixes, unit wording, counter paths.

Counter paths look like ``\\\\host\\object(instance)\\counter``.

Everything here is pure string work on one header cell, so the readers can call it once per
column and the rules stay testable in isolation.
"""
from __future__ import annotations

import re

from warehouse.ingest.model import CounterName

# A unit written at the end of a header: "Latency (ms)", "Read [MB/s]", "cpu_util(%)".
# The bracket content must look like a unit (no spaces, no underscores, at least one non-digit,
# short) so that names such as "disk (2)" or "Processor(_Total)" are left alone.
_UNIT_SUFFIX = re.compile(
    r"^(?P<name>.*?)\s*(?:\((?P<p>[^()\[\]]+)\)|\[(?P<b>[^()\[\]]+)\])$", re.S)
_UNIT_TEXT = re.compile(r"^[%A-Za-z0-9µμ°/.*^·\-]{1,16}$")

# Unit wording kept inside the name; checked in this order (the first hit wins).
_PER_TRANSFER = re.compile(r"\bsec/(?:Transfer|Read|Write)\b", re.I)
_RATE = re.compile(r"/\s*(?:sec|s)$", re.I)
_BYTE_RATE = re.compile(r"(?<![A-Za-z])((?:[KMGT]i?)?B)\s*/\s*(?:sec|s)$")
_SCALED_BYTES = re.compile(r"(?<![A-Za-z])([KMG])Bytes", re.I)
_BYTES_WORD = re.compile(r"Bytes", re.I)
_SNAKE_SUFFIX = {"_ms": "ms", "_pct": "%", "_bytes": "B", "_iops": "IO/s", "_mb": "MB", "_gb": "GB",
                 "_kbps": "kbit/s", "_mbps": "Mbit/s"}


def _suffix_unit(name: str) -> tuple[str, str] | None:
    """(name, unit) when `name` ends with a bracketed unit and something is left before it."""
    match = _UNIT_SUFFIX.match(name)
    if not match:
        return None
    unit = (match.group("p") or match.group("b") or "").strip()
    rest = match.group("name").strip()
    if not rest or not _UNIT_TEXT.match(unit) or unit.isdigit():
        return None
    return rest, unit


def _worded_unit(name: str) -> str:
    """The unit implied by trade wording left in the name ("% Idle", "Bytes/sec", "_ms"...)."""
    if "%" in name:
        return "%"
    if _PER_TRANSFER.search(name):
        return "s"
    scaled = _SCALED_BYTES.search(name)
    if _RATE.search(name):
        written = _BYTE_RATE.search(name)
        if written:
            return f"{written.group(1)}/s"
        if scaled:
            return f"{scaled.group(1).upper()}B/s"
        return "B/s" if _BYTES_WORD.search(name) else "/s"
    if scaled:
        return f"{scaled.group(1).upper()}B"
    lowered = name.lower()
    for suffix, unit in _SNAKE_SUFFIX.items():
        if lowered.endswith(suffix):
            return unit
    return ""


def split_unit(header: str) -> tuple[str, str]:
    """(counter name, unit) of one header; a bracketed unit suffix is cut off, worded units stay."""
    name = header.strip()
    suffixed = _suffix_unit(name)
    if suffixed:
        return suffixed
    return name, _worded_unit(name)


def _split_object_instance(middle: str) -> tuple[str, str] | None:
    """(object, instance) of the text between host and counter, or None if it is malformed."""
    # The instance runs from the first '(' to the closing ')' at the very end, so any brackets,
    # commas, slashes or backslashes inside the instance are kept as they are.
    if middle.endswith(")") and "(" in middle:
        opened = middle.index("(")
        obj, instance = middle[:opened], middle[opened + 1:-1]
    else:
        obj, instance = middle, ""
    obj = obj.strip()
    if not obj or "\\" in obj:
        return None
    return obj, instance.strip()


def parse_counter_path(header: str) -> CounterName | None:
    """Parts of ``\\\\host\\object(instance)\\counter`` (instance optional), else None."""
    text = header.strip()
    if not text.startswith("\\\\"):
        return None
    host, sep, rest = text[2:].partition("\\")
    host = host.strip()
    if not sep or not host or "(" in host:
        return None
    middle, sep, counter_text = rest.rpartition("\\")
    if not sep or not counter_text.strip():
        return None
    parts = _split_object_instance(middle)
    if parts is None:
        return None
    counter, unit = split_unit(counter_text)
    return CounterName(host=host, object=parts[0], instance=parts[1], counter=counter, unit=unit)


def counter_from_header(header: str, host: str = "") -> CounterName:
    """The identity of a plain wide-layout column: only host (from options) and counter are set."""
    counter, unit = split_unit(header)
    return CounterName(host=host, object="", instance="", counter=counter, unit=unit)

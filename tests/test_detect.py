"""Layout detection (warehouse.ingest.detect) on small invented exports."""
from __future__ import annotations

import codecs
import io
import os
from pathlib import Path
from typing import Any

import pyarrow.csv as pacsv
import pytest

from warehouse.errors import BadInputError
from warehouse.ingest.detect import detect, find_column, sniff_encoding
from warehouse.ingest.model import Layout

DATA = Path(__file__).parent / "data" / "detect"


def _write(tmp_path: Path, text: str | bytes, name: str = "x.csv") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode() if isinstance(text, str) else text)
    return path


def _bad(path: Path | str, **options: Any) -> BadInputError:
    with pytest.raises(BadInputError) as info:
        detect(path, **options)
    return info.value


# --------------------------------------------------------------------------- encodings


@pytest.mark.parametrize(("head", "expected"), [
    (codecs.BOM_UTF8 + b"time,cpu\n", "utf-8-sig"),
    (codecs.BOM_UTF16_LE + "time,cpu\n".encode("utf-16-le"), "utf-16"),
    (codecs.BOM_UTF16_BE + "time,cpu\n".encode("utf-16-be"), "utf-16"),
    (b"time,cpu\n", "utf-8"),
    ("time,latency (µs)\n".encode(), "utf-8"),
    ("time,latency (µs)\n".encode("cp1252"), "cp1252"),
    # a two-byte character cut by the end of the sample is still UTF-8
    ("time,latency (µs)".encode()[:-4], "utf-8"),
    ("time,Zürich €".encode()[:-1], "utf-8"),
    (b"", "utf-8"),
])
def test_sniff_encoding(head: bytes, expected: str) -> None:
    assert sniff_encoding(head) == expected


@pytest.mark.parametrize("name", ["wide_utf16.csv", "wide_utf8_bom.csv", "wide_cp1252.csv"])
def test_encoding_names_work_for_decode_and_pyarrow(name: str) -> None:
    path = DATA / name
    lay = detect(path)
    text = path.read_bytes().decode(lay.encoding)
    assert not text.startswith("\ufeff")
    table = pacsv.read_csv(
        io.BytesIO(path.read_bytes()),
        read_options=pacsv.ReadOptions(encoding=lay.encoding, skip_rows=lay.header_line - 1),
        parse_options=pacsv.ParseOptions(delimiter=lay.delimiter),
    )
    assert tuple(table.column_names) == lay.columns


# --------------------------------------------------------------------------- layouts


def test_wide() -> None:
    lay = detect(DATA / "wide.csv")
    assert lay == Layout(
        kind="wide", encoding="utf-8", delimiter=",", decimal=".", header_line=1,
        columns=("timestamp", "cpu_util (%)", "disk_read_latency (ms)", "net_rx_bytes_total"),
        time_col=0, time_format="iso", value_cols=(1, 2, 3),
    )


def test_wide_utf8_bom_with_preamble_and_late_time_column() -> None:
    lay = detect(DATA / "wide_utf8_bom.csv")
    assert lay.kind == "wide"
    assert lay.encoding == "utf-8-sig"
    assert lay.delimiter == ";"
    assert lay.decimal == "."          # ';' alone does not mean decimal comma
    assert lay.header_line == 5        # BOM line is blank, two comments, one more blank
    assert lay.columns == ("seq", "Read [MB/s]", "Write [MB/s]", "Time", "queue_depth")
    assert lay.time_col == 3
    assert lay.value_cols == (0, 1, 2, 4)
    assert lay.time_format == "iso"


def test_wide_utf16_counts_decoded_lines() -> None:
    lay = detect(DATA / "wide_utf16.csv")
    assert lay.encoding == "utf-16"
    assert lay.delimiter == "\t"
    assert lay.header_line == 2
    assert lay.columns == ("Date Time", "Available MBytes", "Pages/sec", "% Committed Bytes In Use")
    assert (lay.kind, lay.time_col, lay.value_cols) == ("wide", 0, (1, 2, 3))
    assert lay.time_format == "iso"


def test_wide_cp1252_pipe() -> None:
    lay = detect(DATA / "wide_cp1252.csv")
    assert lay.encoding == "cp1252"
    assert lay.delimiter == "|"
    assert lay.columns == ("timestamp", "latency (µs)", "ops/s", "Zürich link [Mbit/s]")
    assert (lay.kind, lay.time_col, lay.value_cols, lay.decimal) == ("wide", 0, (1, 2, 3), ".")


def test_european() -> None:
    lay = detect(DATA / "european.csv")
    assert lay == Layout(
        kind="wide", encoding="utf-8", delimiter=";", decimal=",", header_line=1,
        columns=("Zeit", "CPU (%)", "Speicher frei [MB]", "Disk Read Bytes/sec", "Threads"),
        time_col=0, time_format="dmy", value_cols=(1, 2, 3, 4),
    )


def test_long_with_odd_column_order_and_tags() -> None:
    lay = detect(DATA / "long_odd.csv")
    assert lay.kind == "long"
    assert lay.delimiter == ","
    assert lay.decimal == "."
    assert lay.columns == ("value", "site", "unit", "metric", "time", "host", "instance", "rack")
    assert lay.time_col == 4
    assert lay.value_cols == (0,)
    assert lay.metric_col == 3
    assert lay.host_col == 5
    assert lay.instance_col == 6
    assert lay.unit_col == 2
    assert lay.object_col is None
    assert lay.tag_cols == (7, 1)      # sorted by column name: rack, site
    assert lay.ignore_cols == ()
    assert lay.time_format == "iso"


def test_activity_two_sections() -> None:
    lay = detect(DATA / "activity.csv")
    assert lay == Layout(
        kind="activity", encoding="utf-8", delimiter=";", decimal=".", header_line=1,
        columns=("hostname", "interval", "timestamp", "CPU", "%user", "%system", "%iowait",
                 "%idle"),
        time_col=2, time_format="ymd-utc", value_cols=(4, 5, 6, 7), host_col=0,
        instance_col=3, ignore_cols=(1,),
    )


def test_activity_without_instance_column(tmp_path: Path) -> None:
    path = _write(tmp_path, "# hostname;interval;timestamp;kbmemfree;%memused\n"
                            "fs01;60;2026-03-02 08:01:00 UTC;524288;61.50\n")
    lay = detect(path)
    assert (lay.kind, lay.instance_col) == ("activity", None)
    assert (lay.value_cols, lay.ignore_cols) == ((3, 4), (1,))


def test_activity_lowercase_instance_column_found_by_its_cells(tmp_path: Path) -> None:
    path = _write(tmp_path, "\n# hostname;interval;timestamp;dev;tps;rkB/s\n"
                            "fs01;60;1772438460;sda;12,50;100,25\n"
                            "fs01;60;1772438460;sdb;0,00;0,00\n")
    lay = detect(path)
    assert (lay.kind, lay.header_line) == ("activity", 2)
    assert (lay.instance_col, lay.value_cols) == (3, (4, 5))
    assert (lay.decimal, lay.time_format) == (",", "epoch_s")


def test_comment_before_activity_header_is_preamble(tmp_path: Path) -> None:
    path = _write(tmp_path, "# report for vdi-hv01\n# hostname;interval;timestamp;%user\n"
                            "vdi-hv01;60;2026-03-02 08:01:00 UTC;12.00\n")
    lay = detect(path)
    assert (lay.kind, lay.header_line, lay.columns[0]) == ("activity", 2, "hostname")


def test_counter_paths_with_tricky_instances() -> None:
    lay = detect(DATA / "counter_paths.csv")
    assert lay.kind == "counter-paths"
    assert lay.delimiter == ","
    assert lay.decimal == "."
    assert lay.header_line == 1
    assert lay.time_col == 0
    assert lay.value_cols == (1, 2, 3, 4, 5, 6)
    assert lay.zone_note == "(LOGGER-CSV 4.0) (W. Europe Standard Time)(-60)"
    assert lay.time_format == "mdy"
    assert lay.columns[3] == r"\\HV01\Network Interface(eth0 (vlan 12))\Bytes Total/sec"
    assert lay.columns[4] == r"\\HV01\Share(a/b,c)\Open Files"
    assert (lay.metric_col, lay.host_col, lay.instance_col, lay.tag_cols) == (None, None, None, ())


def test_header_only_with_sep_hint() -> None:
    lay = detect(DATA / "header_only.csv")
    assert (lay.kind, lay.delimiter, lay.header_line) == ("wide", ";", 2)
    assert lay.columns == ("time", "cpu (%)", "mem_free_bytes")
    assert (lay.time_col, lay.value_cols, lay.decimal, lay.time_format) == (0, (1, 2), ".", "iso")


def test_time_column_found_by_content(tmp_path: Path) -> None:
    path = _write(tmp_path, "when,cpu\n2026-03-02 08:00:00,1\n2026-03-02 08:01:00,2\n")
    lay = detect(path)
    assert (lay.time_col, lay.value_cols, lay.time_format) == (0, (1,), "iso")


def test_epoch_column_found_by_content_but_not_small_integers(tmp_path: Path) -> None:
    path = _write(tmp_path, "seq,sampled,cpu\n1,1772438400,5\n2,1772438460,6\n")
    assert detect(path).time_col == 1
    assert detect(path).time_format == "epoch_s"


def test_quoted_delimiters_do_not_confuse_the_count(tmp_path: Path) -> None:
    path = _write(tmp_path, 'time;"disk; read";"a,b,c,d"\n'
                            '2026-03-02 08:00:00;"1,5";2\n2026-03-02 08:01:00;"2,5";3\n')
    lay = detect(path)
    assert lay.delimiter == ";"
    assert lay.columns == ("time", "disk; read", "a,b,c,d")
    assert lay.decimal == ","


def test_trailing_delimiter_column_is_ignored(tmp_path: Path) -> None:
    path = _write(tmp_path, "time,cpu,\n2026-03-02 08:00:00,1,\n")
    lay = detect(path)
    assert (lay.value_cols, lay.ignore_cols) == ((1,), (2,))


def test_comma_decimal_only_with_semicolon(tmp_path: Path) -> None:
    tab = _write(tmp_path, "time\tcpu\n2026-03-02 08:00:00\t1,5\n", "tab.csv")
    assert detect(tab).decimal == "."
    semi = _write(tmp_path, "time;cpu;mem\n2026-03-02 08:00:00;1.5;2.5\n", "semi.csv")
    assert detect(semi).decimal == "."


def test_cut_sample_drops_the_partial_last_line(tmp_path: Path) -> None:
    rows = "".join(f"2026-03-02 08:{m:02d}:00,{m}.5,{m}\n" for m in range(60))
    path = _write(tmp_path, "timestamp,cpu,mem\n" + rows)
    lay = detect(path, sample_bytes=100)
    assert (lay.kind, lay.delimiter) == ("wide", ",")
    assert (lay.time_format, lay.value_cols) == ("iso", (1, 2))


def test_cut_in_the_middle_of_a_utf8_character(tmp_path: Path) -> None:
    text = "timestamp,latency (µs)\n" + "2026-03-02 08:00:00,1\n" * 5 + "# ü\n"
    path = _write(tmp_path, text)
    size = len(text.encode()) - 2     # ends in the middle of 'ü'
    assert detect(path, sample_bytes=size).encoding == "utf-8"


def test_pathlike_and_str_paths() -> None:
    assert detect(str(DATA / "wide.csv")) == detect(DATA / "wide.csv")


def test_find_column_by_role() -> None:
    cols = ("Value", "Host Name", "Time (UTC)", "Object_Instance", "Category")
    assert [find_column(cols, r) for r in ("value", "host", "time", "instance", "object")] \
        == [0, 1, 2, 3, 4]
    assert find_column(cols, "metric") is None


# --------------------------------------------------------------------------- forced options


def test_forced_options_win(tmp_path: Path) -> None:
    path = _write(tmp_path, "time|cpu\n2026-03-02 08:00:00|1\n")
    lay = detect(path, delimiter="|", decimal=",", time_format="%Y-%m-%d %H:%M:%S")
    assert (lay.delimiter, lay.decimal, lay.time_format) == ("|", ",", "%Y-%m-%d %H:%M:%S")


def test_forced_tab_alias(tmp_path: Path) -> None:
    path = _write(tmp_path, "time\tcpu\n2026-03-02 08:00:00\t1\n")
    assert detect(path, delimiter="tab").delimiter == "\t"


def test_forced_layout_long_needs_its_columns() -> None:
    err = _bad(DATA / "wide.csv", layout="long")
    assert "metric and a value column" in err.reason and err.line == 1


def test_forced_counter_paths_rejects_plain_headers() -> None:
    err = _bad(DATA / "wide.csv", layout="counter-paths")
    assert "header cell 2 is not a counter path" in err.reason


def test_forced_wide_on_long_file() -> None:
    lay = detect(DATA / "long_odd.csv", layout="wide")
    assert (lay.kind, lay.time_col, lay.metric_col) == ("wide", 4, None)


@pytest.mark.parametrize(("options", "words"), [
    ({"layout": "tall"}, "unknown layout 'tall'"),
    ({"delimiter": ",,"}, "invalid delimiter"),
    ({"delimiter": '"'}, "invalid delimiter"),
    ({"delimiter": "x"}, "invalid delimiter"),
    ({"decimal": ";"}, "invalid decimal mark"),
    ({"decimal": ","}, "cannot also be the delimiter"),
    ({"time_format": "julian"}, "invalid time format 'julian'"),
])
def test_invalid_forced_options(options: dict[str, str], words: str) -> None:
    assert words in _bad(DATA / "wide.csv", **options).reason


# --------------------------------------------------------------------------- errors


def test_empty_file(tmp_path: Path) -> None:
    err = _bad(_write(tmp_path, b""))
    assert err.reason == "empty file" and err.path == str(tmp_path / "x.csv")


def test_blank_lines_only_is_empty(tmp_path: Path) -> None:
    assert _bad(_write(tmp_path, "\n \r\n\n")).reason == "empty file"


def test_comments_only(tmp_path: Path) -> None:
    assert "no header line" in _bad(_write(tmp_path, "# nothing\n# here\n")).reason


def test_binary_with_nul_bytes(tmp_path: Path) -> None:
    err = _bad(_write(tmp_path, b"PK\x03\x04\x14\x00\x00\x00time,cpu\n"))
    assert err.reason == "binary file, not a CSV export"


def test_binary_without_nul_bytes(tmp_path: Path) -> None:
    noise = bytes(b for b in range(1, 32) if b not in b"\t\n\r\f\v") * 20
    assert _bad(_write(tmp_path, noise)).reason == "binary file, not a CSV export"


def test_utf16_without_bom_is_not_text(tmp_path: Path) -> None:
    path = _write(tmp_path, "time,cpu\n".encode("utf-16-le"))
    assert _bad(path).reason == "binary file, not a CSV export"


def test_no_timestamp_column_names_columns_and_line(tmp_path: Path) -> None:
    err = _bad(_write(tmp_path, "\n# note\nhost,cpu,mem\nfs01,1,2\n"))
    assert err.reason == "no timestamp column in header (columns: host, cpu, mem)"
    assert err.line == 3
    assert str(err).endswith("x.csv:3: no timestamp column in header (columns: host, cpu, mem)")


def test_header_only_without_time_column(tmp_path: Path) -> None:
    err = _bad(_write(tmp_path, "cpu,mem\n"))
    assert err.reason == "no timestamp column in header (columns: cpu, mem)"


def test_time_column_alone_has_no_counters(tmp_path: Path) -> None:
    assert "no counter columns" in _bad(_write(tmp_path, "timestamp\n2026-03-02 08:00:00\n")).reason


def test_unreadable_time_values(tmp_path: Path) -> None:
    err = _bad(_write(tmp_path, "time,cpu\nsoon,1\nlater,2\n"))
    assert "cannot tell the time format of column 'time'" in err.reason and err.line == 2


def test_missing_file(tmp_path: Path) -> None:
    err = _bad(tmp_path / "nope.csv")
    assert err.reason == f"cannot read: {os.strerror(2)}"


def test_directory(tmp_path: Path) -> None:
    assert _bad(tmp_path).reason.startswith("cannot read: ")


def test_header_longer_than_the_sample(tmp_path: Path) -> None:
    header = "timestamp," + ",".join(f"c{i}" for i in range(200)) + "\n"
    err = _bad(_write(tmp_path, header + "2026-03-02 08:00:00" + ",1" * 200 + "\n"),
               sample_bytes=64)
    assert "no complete header line" in err.reason

"""import-csv and lines it cannot use: every failure alike (a malformed line, bytes that are not
UTF-8, a time outside what the stores hold, an unreadable time) rejects that line, names the
file and the line, and the rest is written; what was stored stays. Only a whole-file problem
(a header that is not UTF-8) refuses the file before anything is written. Times closer than
the store's resolution are counted as replaced duplicates.

The plant values are invented demo values; the time limits are those of a signed 64-bit count
of nanoseconds since 1970 (pandas' documented Timestamp.min/max: 1677-09-21, 2262-04-11)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_cli_tools import PLANT, write_config

from isentrope.daemon import cli
from isentrope.daemon.commands.import_csv import line_problem, scan_lines
from isentrope.daemon.config import load_config

T0 = pd.Timestamp("2026-03-01T00:00:00Z")
TAGS = [tag for tag, *_ in PLANT.values()]


def wide_rows(n: int, start: pd.Timestamp = T0) -> list[str]:
    """n one-minute rows of all ten tags (216,000 samples for n = 21,600)."""
    times = pd.date_range(start, periods=n, freq="1min").strftime("%Y-%m-%dT%H:%M:%SZ")
    typical = np.array([typical for _, _, typical, _ in PLANT.values()])
    return [t + "," + ",".join(f"{v:.6g}" for v in typical) for t in times]


def write(tmp_path, name: str, lines: list[str] | bytes) -> str:
    path = tmp_path / name
    if isinstance(lines, bytes):
        path.write_bytes(lines)
    else:
        path.write_text("\n".join(lines) + "\n")
    return str(path)


def stored(config_path) -> pd.DataFrame:
    config = load_config(config_path)
    with config.store.open() as store:
        return store.read_raw(list(config.mappings), T0, T0 + pd.Timedelta("30D"))


def import_csv(config, *files, ok=True, capsys=None) -> str:
    rc = cli.main(["import-csv", "-c", str(config), *map(str, files)])
    out = capsys.readouterr()
    assert rc == (0 if ok else 1), out.err
    return out.out + out.err


@pytest.mark.slow
def test_one_malformed_row_after_216000_good_samples_loses_none_of_them(tmp_path, capsys):
    config = write_config(tmp_path)
    rows = ["time," + ",".join(TAGS)] + wide_rows(21_600)
    rows.insert(15_000, rows[15_000] + ",999")  # one field too many, as line 15,001
    out = import_csv(config, write(tmp_path, "year.csv", rows), capsys=capsys)
    assert (
        "rows rejected: 1 (1 malformed row); e.g. year.csv line 15001 12 fields where the header has 11"
        in out
    )
    assert "rejected lines of year.csv: 15001" in out
    assert "samples written: 216000" in out
    got = stored(config)
    assert len(got) == 21_600 and int(got.notna().sum().sum()) == 216_000


def test_invalid_utf8_names_the_file_and_line_and_the_rest_is_written(tmp_path, capsys):
    config = write_config(tmp_path)
    lines = ["time,tag,value"] + [f"2026-03-01T00:0{i}:00Z,U7-MS-P,16.5{i}" for i in range(6)]
    data = ("\n".join(lines) + "\n").encode().replace(b"16.53", b"16.5\xff3")
    out = import_csv(config, write(tmp_path, "latin.csv", data), capsys=capsys)
    assert "rows rejected: 1 (1 not UTF-8); e.g. latin.csv line 5 not UTF-8 (byte 0xff at column 34)" in out
    assert "samples written: 5" in out
    assert stored(config)["throttle_p"].dropna().tolist() == [16.50, 16.51, 16.52, 16.54, 16.55]


def test_a_header_that_is_not_utf8_refuses_the_file_before_anything_is_written(tmp_path, capsys):
    config = write_config(tmp_path)
    good = write(tmp_path, "a.csv", ["time,tag,value", "2026-03-01T00:00:00Z,U7-MS-P,16.5"])
    bad = write(tmp_path, "b.csv", b"time,tag,valu\xe9\n2026-03-01T00:01:00Z,U7-MS-P,16.6\n")
    out = import_csv(config, good, bad, ok=False, capsys=capsys)
    assert f"{bad}: line 1 (the header) is not UTF-8 text (byte 0xe9 at column 14)" in out
    assert "(nothing was written)" in out
    assert not (tmp_path / "unit7.sqlite").exists() or stored(config).empty


@pytest.mark.parametrize(
    "text, option",
    [
        ("2300-01-01T00:00:00Z", []),
        ("1500-06-01T00:00", []),
        ("0001-01-01T00:00:00Z", []),
        ("9999-12-31T23:59:59Z", []),
        ("01/01/2300 10:00", ["--dayfirst"]),
        ("01-Jan-1600 10:00", ["--time-format", "%d-%b-%Y %H:%M"]),
    ],
)
def test_a_time_outside_what_the_stores_hold_is_rejected_with_its_line(tmp_path, capsys, text, option):
    config = write_config(tmp_path)
    inside = {
        (): "2026-03-01T00:00:00Z",
        ("--dayfirst",): "01/03/2026 00:00",
        ("--time-format", "%d-%b-%Y %H:%M"): "01-Mar-2026 00:00",
    }[tuple(option)]
    path = write(tmp_path, "far.csv", ["time,tag,value", f"{inside},U7-MS-P,16.5", f"{text},U7-MS-P,99"])
    rc = cli.main(["import-csv", "-c", str(config), path, *option])
    out = capsys.readouterr().out
    assert rc == 0
    assert (
        f"rows rejected: 1 (1 time outside 1677-09-22 to 2262-04-10 (what the stores hold)); e.g. far.csv line 3 '{text}'"
        in out
    )
    assert "samples written: 1" in out


def test_rejected_lines_leave_stored_values_alone_and_are_all_listed(tmp_path, capsys):
    config = write_config(tmp_path)
    first = write(
        tmp_path,
        "first.csv",
        ["time,tag,value"] + [f"2026-03-01T00:{i:02d}:00Z,U7-MS-P,16.5" for i in range(60)],
    )
    import_csv(config, first, capsys=capsys)
    lines = ["time,tag,value"] + [f"2026-03-01T00:{i:02d}:00Z,U7-MS-P,17.0" for i in range(60)]
    for i in (3, 4, 5, 9):  # rows 3-5 and 9: lines 5-7 and 11
        lines[i + 1] += ",extra"
    lines[30] = '2026-03-01T00:29:00Z,"U7-MS-P,17.0'  # a quote that does not close: line 31
    lines[40] = "2400-03-01T00:39:00Z,U7-MS-P,17.0"  # line 41
    out = import_csv(config, write(tmp_path, "second.csv", lines), capsys=capsys)
    assert "rows rejected: 6 (5 malformed row, 1 time outside" in out
    assert "rejected lines of second.csv: 5-7, 11, 31, 41" in out
    got = stored(config)["throttle_p"]
    kept = got[got == 16.5].index.strftime("%H:%M").tolist()
    # the times of the rejected lines (00:39's line says 2400) keep the value stored before
    assert kept == ["00:03", "00:04", "00:05", "00:09", "00:29", "00:39"]
    assert (got == 17.0).sum() == 54


def test_times_closer_than_the_store_resolution_count_as_replaced(tmp_path, capsys):
    config = write_config(tmp_path)  # SQLite keeps milliseconds
    lines = [
        "time,tag,value",
        "2026-03-01T00:00:00.0001Z,U7-MS-P,16.1",
        "2026-03-01T00:00:00.0009Z,U7-MS-P,16.2",  # the same millisecond: replaces 16.1
        "2026-03-01T00:00:00.0011Z,U7-MS-P,16.3",  # the next millisecond
        "2026-03-01T00:00:00.0011Z,U7-MS-P,16.4",  # the same time as written
    ]
    out = import_csv(config, write(tmp_path, "fine.csv", lines), capsys=capsys)
    assert "duplicate (time, tag) values replaced by the later one: 2" in out
    assert (
        "of those duplicates, times closer than the store's resolution (1 ms), which it keeps as one: 1"
        in out
    )
    assert "samples written: 2" in out
    got = stored(config)["throttle_p"].dropna()
    assert got.tolist() == [16.2, 16.4]


def test_a_nanosecond_store_keeps_them_apart(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("ISEN_IMPORT_TOKEN", "tok-import-dry-run")
    store = '[store]\nkind = "influx2"\nurl = "http://127.0.0.1:9"\norg = "o"\nbucket = "b"\ntoken = "${ISEN_IMPORT_TOKEN}"\n'
    config = write_config(tmp_path, store=store)
    lines = [
        "time,tag,value",
        "2026-03-01T00:00:00.0001Z,U7-MS-P,16.1",
        "2026-03-01T00:00:00.0009Z,U7-MS-P,16.2",
    ]
    rc = cli.main(["import-csv", "-c", str(config), write(tmp_path, "fine.csv", lines), "--dry-run"])
    out = capsys.readouterr().out
    assert rc == 0 and "duplicate (time, tag) values replaced by the later one: 0" in out
    assert "samples that would be written (dry run): 2" in out


@pytest.mark.parametrize(
    "raw, problem",
    [
        (b"2026-03-01T00:00Z,P,1\n", None),
        (b"2026-03-01T00:00Z,P,1\r\n", None),
        (b"\n", None),
        (b'2026-03-01T00:00Z,"P,Q",1\n', None),  # a quoted separator is no field
        (b"2026-03-01T00:00Z,P,1,2\n", "4 fields where the header has 3"),
        (b'2026-03-01T00:00Z,"P,1\n', "a quote that does not close on its line"),
        (b"2026-03-01T00:00Z,P,\xc3\n", "not UTF-8 (byte 0xc3 at column 21)"),
    ],
)
def test_line_problem(raw, problem):
    assert line_problem(raw, ",", 3) == problem


def test_scan_maps_rows_to_file_lines(tmp_path):
    path = tmp_path / "x.csv"
    path.write_bytes(b"time,tag,value\na,b,c\na,b,c,d\n\na,b,c\n\xff\na,b,c")
    source = scan_lines(path, ",", 3, tmp_path)
    assert source.lines.tolist() == [2, 4, 5, 7]
    assert [n for n, _ in source.rejected] == [3, 6]
    assert source.path.read_bytes() == b"time,tag,value\na,b,c\n\na,b,c\na,b,c\n"

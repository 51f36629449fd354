"""The `check`, `import-csv` and `export` commands, end to end through ``cli.main`` against the
SQLite store, plus the time-zone handling of the importer.

Plant readings below are invented demo values of a fictional 500 MW unit (no source needed:
they only have to be plausible); the daylight-saving instants are facts of the EU rule
(Directive 2000/84/EC: summer time runs from 01:00 UTC on the last Sunday of March to 01:00 UTC
on the last Sunday of October; in 2026 those are 29 March and 25 October), and the unit factor
1 psi = 6.894757 kPa is NIST SP 811 (2008) Appendix B.
"""

from __future__ import annotations

import importlib
import socket
import textwrap
from collections import Counter
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest

from isentrope.daemon import cli
from isentrope.daemon.commands import check as check_cmd
from isentrope.daemon.commands import export as export_cmd
from isentrope.daemon.commands.import_csv import detect_layout, parse_times
from isentrope.daemon.config import load_config

#: Role -> (tag, plant unit, typical value in that unit, noise). Invented demo values.
PLANT = {
    "throttle_p": ("U7-MS-P", "MPa(a)", 16.5, 0.02),
    "throttle_t": ("U7-MS-T", "degC", 538.0, 0.3),
    "cold_reheat_p": ("U7-CRH-P", "MPa(a)", 3.9, 0.01),
    "cold_reheat_t": ("U7-CRH-T", "degC", 330.0, 0.3),
    "hot_reheat_p": ("U7-HRH-P", "MPa(a)", 3.55, 0.01),
    "hot_reheat_t": ("U7-HRH-T", "degC", 538.0, 0.3),
    "crossover_p": ("U7-XO-P", "kPa(a)", 950.0, 2.0),
    "crossover_t": ("U7-XO-T", "degC", 350.0, 0.3),
    "condenser_p": ("U7-CND-P", "kPa(a)", 5.0, 0.02),
    "gross_output": ("U7-GEN-MW", "MW", 480.0, 1.0),
}
END = pd.Timestamp("2026-05-04T12:00:00Z")


def write_config(
    tmp_path: Path, units: dict | None = None, extra: str = "", store: str | None = None
) -> Path:
    units = units or {}
    parts = [
        '[unit]\nname = "Test Unit 7"\nplant = "Invented Station"\nrating_mw = 500.0\n',
        store or '[store]\nkind = "sqlite"\npath = "unit7.sqlite"\n',
        "[screening]\nbarometric_kpa = 100.0\n",
    ]
    for role, (tag, unit, typical, _) in PLANT.items():
        lo, hi = (0.0, 2.5 * typical) if unit != "degC" else (0.0, 650.0)
        parts.append(
            f'[roles.{role}]\ntag = "{tag}"\nunit = "{units.get(role, unit)}"\nrange = [{lo}, {hi}]\n'
        )
    parts.append(textwrap.dedent(extra))
    path = tmp_path / "unit7.toml"
    path.write_text("\n".join(parts))
    return path


def plant_frame(start: pd.Timestamp, periods: int, seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    index = pd.date_range(start, periods=periods, freq="1min", name="time")
    return pd.DataFrame(
        {
            role: typical + noise * rng.standard_normal(periods)
            for role, (_, _, typical, noise) in PLANT.items()
        },
        index=index,
    )


def open_store(config_path: Path):
    return load_config(config_path).store.open()


def store_with_day(tmp_path: Path, units: dict | None = None, frame: pd.DataFrame | None = None) -> Path:
    path = write_config(tmp_path, units)
    config = load_config(path)
    frame = plant_frame(END - pd.Timedelta("24h"), 1440) if frame is None else frame
    with config.store.open() as store:
        store.write_raw(list(config.mappings), frame)
    return path


# --- check -------------------------------------------------------------------------------
def test_check_all_ok(tmp_path, capsys):
    path = store_with_day(tmp_path)
    rc = cli.main(["check", "-c", str(path), "--end", END.isoformat()])
    out = capsys.readouterr().out
    assert rc == 0, out
    lines = out.splitlines()
    assert lines[1].split() == [
        "role",
        "tag",
        "unit",
        "samples",
        "last",
        "time",
        "(UTC)",
        "min",
        "max",
        "verdict",
    ]
    rows = {line.split()[0]: line.split() for line in lines[3 : 3 + len(PLANT)]}
    assert set(rows) == set(PLANT)
    assert rows["throttle_p"][:5] == ["throttle_p", "U7-MS-P", "MPa(a)", "1440", "2026-05-04"]
    assert rows["throttle_p"][5] == "11:59:00" and rows["throttle_p"][-1] == "ok"
    assert lines[-1].startswith("all 10 roles ok.")


def test_check_finds_a_pressure_in_the_wrong_unit(tmp_path, capsys):
    """Throttle pressure declared psig while the historian holds kPa: 16 500 "psig" is 113.9
    MPa, implausible; as kPa it is 16.5 MPa (1 psi = 6.894757 kPa, NIST SP 811)."""
    frame = plant_frame(END - pd.Timedelta("24h"), 1440)
    frame["throttle_p"] = 16500.0
    frame.iloc[::2, 0] = 16501.0  # not flat
    path = store_with_day(tmp_path, units={"throttle_p": "psig"}, frame=frame)
    rc = cli.main(["check", "-c", str(path), "--end", END.isoformat()])
    captured = capsys.readouterr()
    assert rc == 1
    row = next(line for line in captured.out.splitlines() if line.startswith("throttle_p"))
    assert row.endswith(
        "PROBLEM: 1440 outside range [0, 41.25]; median 16500.5 psig = 113.9 MPa(a), implausible (expected 2-35 MPa(a)); "
        "looks like kPa(a) or kPa(g)"
    )
    assert captured.err == "1 of 10 roles have problems.\n"


def test_check_no_data_stale_flat_out_of_range(tmp_path, capsys):
    frame = plant_frame(END - pd.Timedelta("24h"), 1440)
    frame.loc[frame.index >= END - pd.Timedelta("3h"), "throttle_t"] = np.nan  # stale 3 h
    frame["cold_reheat_t"] = 330.0  # flat
    frame.iloc[100:105, frame.columns.get_loc("condenser_p")] = 99.0  # above range [0, 12.5]
    frame["crossover_t"] = np.nan  # no data
    path = store_with_day(tmp_path, frame=frame)
    rc = cli.main(["check", "-c", str(path), "--end", END.isoformat()])
    out = capsys.readouterr().out
    assert rc == 1
    verdict = {line.split()[0]: line for line in out.splitlines()[3:13]}
    assert verdict["throttle_t"].endswith("PROBLEM: stale: last sample 3.0 h before the end")
    assert verdict["cold_reheat_t"].endswith("PROBLEM: flat for 24.0 h from 2026-05-03 12:00")
    assert verdict["condenser_p"].endswith("PROBLEM: 5 outside range [0, 12.5]")
    assert verdict["crossover_t"].endswith("PROBLEM: no data")
    assert verdict["throttle_p"].endswith(" ok")


def test_check_finds_what_the_synthetic_case_injected(tmp_path, capsys):
    """The golden case's truth.json names a flatline, a data gap and an out-of-range burst;
    importing its history and checking it must report each on the right tag."""
    import json
    import shutil

    case = Path(__file__).resolve().parents[2] / "fixtures" / "cases" / "greywater_u2_2day"
    assert case.is_dir(), "golden case greywater_u2_2day is missing from fixtures/cases"
    truth = json.loads((case / "truth.json").read_text())
    shutil.copy(case / "config.toml", tmp_path / "config.toml")
    path = tmp_path / "config.toml"
    assert cli.main(["import-csv", "-c", str(path), str(case / "history.csv")]) == 0
    capsys.readouterr()
    rc = cli.main(["check", "-c", str(path), "--end", "2025-01-03T00:00Z", "--since", "2d"])
    out = capsys.readouterr().out
    assert rc == 1
    verdict = {line.split()[0]: line for line in out.splitlines()[3:]}
    spike, flat, gap = truth["spike"], truth["flatline"], truth["gap"]
    lo, hi = spike["range"]
    assert f"{spike['samples']} outside range [{lo:g}, {hi:g}]" in verdict[spike["role"]]
    # a hold starts at the last live sample (5-min data): its time is within 5 min of the truth
    start = pd.Timestamp(flat["start"])
    found = verdict[flat["role"]].split("flat for ")[1].split(" from ")[1][:16]
    assert abs(pd.Timestamp(found, tz="UTC") - start) <= pd.Timedelta("5min")
    gap_from = verdict["gross_output"].split("gap of ")[1].split(" from ")[1][:16]
    assert abs(pd.Timestamp(gap_from, tz="UTC") - pd.Timestamp(gap["start"])) <= pd.Timedelta("5min")


def test_check_offline_unit_is_not_judged_on_units(tmp_path, capsys):
    frame = plant_frame(END - pd.Timedelta("24h"), 1440)
    frame["gross_output"] = 0.0 + 0.01 * np.arange(1440) % 1.0
    frame["throttle_p"] = 0.2 + 0.001 * (np.arange(1440) % 7)  # depressurised
    path = store_with_day(tmp_path, frame=frame)
    cli.main(["check", "-c", str(path), "--end", END.isoformat()])
    out = capsys.readouterr().out
    row = next(line for line in out.splitlines() if line.startswith("throttle_p"))
    assert row.endswith("unit offline: unit not judged")


@pytest.mark.parametrize(
    "kind, body",
    [
        ("influx2", 'org = "o"\nbucket = "b"\ntoken = "${ISEN_CHECK_TOKEN}"\n'),
        ("influx1", 'database = "d"\ntoken = "${ISEN_CHECK_TOKEN}"\n'),
    ],
)
def test_check_unreachable_store_exits_3(tmp_path, capsys, monkeypatch, kind, body):
    importlib.import_module(f"isentrope.daemon.stores.{kind}")  # the store must import
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    sock.close()  # a closed port: connection refused
    store = f'[store]\nkind = "{kind}"\nurl = "http://127.0.0.1:{port}"\n{body}timeout = "2s"\n'
    path = write_config(tmp_path, store=store)
    monkeypatch.setenv("ISEN_CHECK_TOKEN", "t")
    rc = cli.main(["check", "-c", str(path), "--end", END.isoformat()])
    err = capsys.readouterr().err
    assert rc == 3, err
    assert err.startswith("isentrope: store unreachable: ")


def test_check_and_export_do_not_create_a_missing_sqlite_file(tmp_path, capsys):
    path = write_config(tmp_path)
    assert cli.main(["check", "-c", str(path)]) == 1
    assert capsys.readouterr().err == (
        f"isentrope: error: no SQLite store at {tmp_path / 'unit7.sqlite'} "
        "(check [store] path; the file is created by import-csv, run, "
        "backfill or demo)\n"
    )
    assert cli.main(["export", "-c", str(path), "--start", "2026-01-01", "--end", "2026-01-02"]) == 1
    assert not (tmp_path / "unit7.sqlite").exists()


def test_check_config_only_does_not_connect(tmp_path, capsys):
    path = write_config(tmp_path)
    assert cli.main(["check", "-c", str(path), "--config-only"]) == 0
    assert capsys.readouterr().out.startswith(
        f"{path}: valid configuration of Test Unit 7 (sqlite store, 10 mapped roles: "
    )
    assert not (tmp_path / "unit7.sqlite").exists()


def test_check_bad_since(tmp_path, capsys):
    path = write_config(tmp_path)
    assert cli.main(["check", "-c", str(path), "--since", "yesterday"]) == 1
    assert capsys.readouterr().err.startswith("isentrope: error: --since: expected a duration")
    # --end is ISO 8601 only, like every command's times
    assert cli.main(["check", "-c", str(path), "--end", "05/02/2025"]) == 1
    err = capsys.readouterr().err
    assert "--end:" in err and "2025-02-05 (5 February)" in err


# --- import-csv --------------------------------------------------------------------------
def test_layout_detection():
    assert detect_layout(["time", "tag", "value"]) == "long"
    assert detect_layout(["Timestamp", "TagName", "Value"]) == "long"
    assert detect_layout(["time", "U7-MS-P", "U7-MS-T"]) == "wide"
    assert detect_layout(["time", "value"]) == "wide"


def _times(strings, zone="Europe/Berlin", **kw):
    t, why = parse_times(pd.Series(strings), ZoneInfo(zone), **kw)
    return [x.isoformat() if pd.notna(x) else None for x in t], list(why)


def test_naive_times_in_a_zone_with_daylight_saving():
    # CET = UTC+1, CEST = UTC+2 (EU rule; change at 01:00 UTC on 29 March / 25 October 2026)
    t, why = _times(
        ["2026-01-15 12:00", "2026-07-15 12:00", "2026-07-15T12:00:00Z", "2026-07-15T12:00:00-04:00"]
    )
    assert t == [
        "2026-01-15T11:00:00+00:00",
        "2026-07-15T10:00:00+00:00",
        "2026-07-15T12:00:00+00:00",
        "2026-07-15T16:00:00+00:00",
    ]
    assert why == ["", "", "", ""]


def test_repeated_hour_is_rejected_or_resolved_explicitly():
    s = ["2026-10-25 02:15", "2026-10-25 02:45", "2026-10-25 02:15", "2026-10-25 02:45", "2026-10-25 03:15"]
    t, why = _times(s)
    assert t == [None, None, None, None, "2026-10-25T02:15:00+00:00"]
    assert why[:4] == ["ambiguous local time in Europe/Berlin"] * 4
    assert _times(s, ambiguous="earlier")[0][:2] == ["2026-10-25T00:15:00+00:00", "2026-10-25T00:45:00+00:00"]
    assert _times(s, ambiguous="later")[0][:2] == ["2026-10-25T01:15:00+00:00", "2026-10-25T01:45:00+00:00"]
    t, why = _times(s + ["2026-10-25 02:15"], ambiguous="file-order")
    assert t == [
        "2026-10-25T00:15:00+00:00",
        "2026-10-25T00:45:00+00:00",
        "2026-10-25T01:15:00+00:00",
        "2026-10-25T01:45:00+00:00",
        "2026-10-25T02:15:00+00:00",
        None,
    ]
    assert why[-1] == "ambiguous local time in Europe/Berlin seen more than twice"


def test_file_order_counts_per_tag_and_across_chunks():
    seen = Counter()
    zone = ZoneInfo("Europe/Berlin")
    first, _ = parse_times(
        pd.Series(["2026-10-25 02:30"] * 2), zone, "file-order", group=pd.Series(["A", "B"]), seen=seen
    )
    second, _ = parse_times(
        pd.Series(["2026-10-25 02:30"] * 2), zone, "file-order", group=pd.Series(["A", "B"]), seen=seen
    )
    assert list(first) == [pd.Timestamp("2026-10-25T00:30Z")] * 2
    assert list(second) == [pd.Timestamp("2026-10-25T01:30Z")] * 2


def test_skipped_hour_is_rejected_or_shifted():
    t, why = _times(["2026-03-29 02:30", "2026-03-29 03:30"])
    assert t == [None, "2026-03-29T01:30:00+00:00"] and why[0] == "nonexistent local time in Europe/Berlin"
    t, _ = _times(["2026-03-29 02:30"], nonexistent="shift-forward")
    assert t == ["2026-03-29T01:00:00+00:00"]  # 03:00 CEST


def test_unreadable_and_date_order():
    t, why = _times(["not a time", "", "03/04/2026 10:00"], zone="UTC")
    # a numeric date is never given an order of its own: import_files decides one per file
    assert why == ["unreadable time", "empty time", "numeric date with no day/month order given"]
    assert t == [None, None, None]
    assert _times(["03/04/2026 10:00"], zone="UTC", order="month-first")[0] == ["2026-03-04T10:00:00+00:00"]
    assert _times(["03/04/2026 10:00"], zone="UTC", order="day-first")[0] == ["2026-04-03T10:00:00+00:00"]


LONG_CSV = """time,tag,value
2026-05-04T10:00:00Z,U7-MS-P,16.51
2026-05-04T10:00:00Z,U7-GEN-MW,480.5
2026-05-04T10:01:00Z,U7-MS-P,Bad Input
2026-05-04T10:01:00Z,U7-GEN-MW,481.0
2026-05-04T10:02:00Z,U7-MS-P,16.40
2026-05-04T10:02:00Z,U7-MS-P,16.52
2026-05-04T10:02:00Z,U7-SPARE,1.0
yesterday noon,U7-MS-P,16.6
2026-05-04T10:03:00Z,U7-GEN-MW,
"""


def test_import_long_layout(tmp_path, capsys):
    path = write_config(tmp_path)
    csv = tmp_path / "long.csv"
    csv.write_text(LONG_CSV)
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[:6] == [
        "files: 1",
        "rows read: 9",
        "rows rejected: 1 (1 unreadable time); e.g. long.csv line 9 'yesterday noon'",
        "values not a number, left out (not written; a value already stored stays): 1; "
        "e.g. long.csv line 4 U7-MS-P 'Bad Input'",
        "duplicate (time, tag) values replaced by the later one: 1",
        "samples written: 4",
    ]
    assert "tags not in the configuration, skipped: U7-SPARE (1)" in out
    with open_store(path) as store:
        config = load_config(path)
        got = store.read_raw(
            list(config.mappings), pd.Timestamp("2026-05-04T09:00Z"), pd.Timestamp("2026-05-04T11:00Z")
        )
    got = got[["throttle_p", "gross_output"]].dropna(how="all")
    assert list(got.index.strftime("%H:%M")) == ["10:00", "10:01", "10:02"]
    assert got["throttle_p"].tolist()[0] == 16.51 and np.isnan(got["throttle_p"].iloc[1])
    assert got["throttle_p"].iloc[2] == 16.52  # the later duplicate wins
    assert got["gross_output"].tolist()[:2] == [480.5, 481.0]


def test_import_wide_local_time_and_reimport_replaces(tmp_path, capsys):
    path = write_config(tmp_path)
    csv = tmp_path / "wide.csv"
    csv.write_text(
        "Timestamp;U7-MS-P;U7-GEN-MW\n"
        "25.10.2026 02:30;16,5;480\n"
        "25.10.2026 02:30;16,6;481\n"
        "25.10.2026 03:30;16,7;I/O Timeout\n"
    )
    args = [
        "import-csv",
        "-c",
        str(path),
        str(csv),
        "--timezone",
        "Europe/Berlin",
        "--ambiguous",
        "file-order",
        "--decimal",
        ",",
        "--dayfirst",
    ]
    assert cli.main(args) == 0
    first = capsys.readouterr().out
    assert "samples written: 5" in first and "dates in wide.csv: day/month/year (--dayfirst)" in first
    assert (
        "values not a number, left out (not written; a value already stored stays): 1; "
        "e.g. wide.csv line 4 U7-GEN-MW 'I/O Timeout'"
    ) in first
    assert cli.main(args) == 0  # the same file again: replaced, not duplicated
    capsys.readouterr()
    config = load_config(path)
    with config.store.open() as store:
        got = store.read_raw(
            list(config.mappings), pd.Timestamp("2026-10-24T00:00Z"), pd.Timestamp("2026-10-26T00:00Z")
        )
    got = got[["throttle_p", "gross_output"]].dropna(how="all")
    assert [t.isoformat() for t in got.index] == [
        "2026-10-25T00:30:00+00:00",
        "2026-10-25T01:30:00+00:00",
        "2026-10-25T02:30:00+00:00",
    ]
    assert got["throttle_p"].tolist() == [16.5, 16.6, 16.7]
    assert got["gross_output"].iloc[:2].tolist() == [480.0, 481.0] and np.isnan(got["gross_output"].iloc[2])


def test_import_rejects_ambiguous_by_default_and_keeps_stored_data(tmp_path, capsys):
    path = store_with_day(tmp_path)
    csv = tmp_path / "dst.csv"
    csv.write_text("time,U7-MS-P\n2026-10-25 02:30,16.5\n2026-10-25 03:30,16.6\n")
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--timezone", "Europe/Berlin"]) == 0
    out = capsys.readouterr().out
    assert "rows rejected: 1 (1 ambiguous local time in Europe/Berlin)" in out
    config = load_config(path)
    with config.store.open() as store:
        day = store.read_raw(list(config.mappings), END - pd.Timedelta("24h"), END)
    assert day["throttle_p"].notna().sum() == 1440  # what was stored before is still there


def test_import_errors(tmp_path, capsys):
    path = write_config(tmp_path)
    assert cli.main(["import-csv", "-c", str(path), str(tmp_path / "missing.csv")]) == 1
    assert capsys.readouterr().err == f"isentrope: error: no such file: {tmp_path / 'missing.csv'}\n"
    csv = tmp_path / "x.csv"
    csv.write_text("time,U7-MS-P\n2026-01-01T00:00Z,1\n")
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--timezone", "Mars/Olympus"]) == 1
    assert "unknown time zone 'Mars/Olympus'" in capsys.readouterr().err
    bad = tmp_path / "bad.csv"
    bad.write_text("time,U7-MS-P\n2026-01-01T00:00Z,1,2,3\n")
    assert cli.main(["import-csv", "-c", str(path), str(bad)]) == 1  # nothing left to write
    out = capsys.readouterr()
    assert (
        "rows rejected: 1 (1 malformed row); e.g. bad.csv line 2 4 fields where the header has 2" in out.out
    )
    assert out.err.startswith("isentrope: error: no sample written: ")
    # a malformed row is rejected with its line; the rows around it are written
    bad.write_text("time,U7-MS-P\n2026-01-01T00:00Z,1\n2026-01-01T00:01Z,1,2,3\n2026-01-01T00:02Z,2\n")
    assert cli.main(["import-csv", "-c", str(path), str(bad)]) == 0
    out = capsys.readouterr().out
    assert "rejected lines of bad.csv: 3" in out and "samples written: 2" in out


def test_import_dry_run_writes_nothing(tmp_path, capsys):
    path = write_config(tmp_path)
    csv = tmp_path / "long.csv"
    csv.write_text(LONG_CSV)
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--dry-run"]) == 0
    assert "samples that would be written (dry run): 4" in capsys.readouterr().out
    assert not (tmp_path / "unit7.sqlite").exists()


# --- export ------------------------------------------------------------------------------
def test_export_csv(tmp_path, capsys):
    path = write_config(tmp_path)
    index = pd.DatetimeIndex(
        ["2026-05-04T10:00:00Z", "2026-05-04T10:01:00Z", "2026-05-04T10:02:00Z"], name="time"
    )
    samples = pd.DataFrame({"eta_hp": [0.8626, 0.8611, np.nan], "steady": [True, False, True]}, index=index)
    windows = pd.DataFrame({"eta_ip": [0.9022]}, index=index[1:2])
    config = load_config(path)
    with config.store.open() as store:
        store.write_results("section_samples", samples, {"unit": "Test Unit 7"})
        store.write_results("steady_windows", windows, {"unit": "Test Unit 7"})
        store.write_results("section_samples", samples * 0 + 1, {"unit": "Another unit"})
    out = tmp_path / "out.csv"
    rc = cli.main(
        [
            "export",
            "-c",
            str(path),
            "--start",
            "2026-05-04T10:00",
            "--end",
            "2026-05-04T10:02",
            "--format",
            "csv",
            "-o",
            str(out),
            "--measurement",
            "section_samples",
        ]
    )
    assert rc == 0
    frame = pd.read_csv(out)
    assert list(frame["time"]) == ["2026-05-04T10:00:00Z", "2026-05-04T10:01:00Z"]  # end exclusive
    assert frame["eta_hp"].tolist() == [0.8626, 0.8611]
    assert frame["steady"].astype(str).str.lower().isin(["true", "1", "1.0"]).tolist() == [True, False]
    capsys.readouterr()
    rc = cli.main(
        [
            "export",
            "-c",
            str(path),
            "--start",
            "2026-05-04",
            "--end",
            "2026-05-05",
            "--measurement",
            "section_samples",
            "--measurement",
            "steady_windows",
        ]
    )
    text = capsys.readouterr().out
    frame = pd.read_csv(__import__("io").StringIO(text))
    assert set(frame.columns) >= {"time", "section_samples.eta_hp", "steady_windows.eta_ip"}
    assert frame["steady_windows.eta_ip"].dropna().tolist() == [0.9022]
    assert len(frame) == 3


def test_export_needs_a_tag_when_several_series_match(tmp_path, capsys):
    path = write_config(tmp_path)
    index = pd.DatetimeIndex(["2026-05-04T10:00:00Z"], name="time")
    config = load_config(path)
    with config.store.open() as store:
        for section, value in (("hp", -0.4), ("ip", -1.1)):
            store.write_results(
                "deviation",
                pd.DataFrame({"deviation": [value]}, index=index),
                {"unit": "Test Unit 7", "section": section},
            )
    args = [
        "export",
        "-c",
        str(path),
        "--start",
        "2026-05-04",
        "--end",
        "2026-05-05",
        "--measurement",
        "deviation",
    ]
    assert cli.main(args) == 1
    assert capsys.readouterr().err == (
        "isentrope: error: deviation holds one series per section; choose one "
        "with --tag, e.g. --tag section=hp\n"
    )
    assert cli.main(args + ["--tag", "section=ip"]) == 0
    assert capsys.readouterr().out == "time,deviation\n2026-05-04T10:00:00Z,-1.1\n"


def test_export_empty_window_and_bad_times(tmp_path, capsys):
    path = write_config(tmp_path)
    load_config(path).store.open().close()  # an empty store
    rc = cli.main(["export", "-c", str(path), "--start", "2020-01-01", "--end", "2020-01-02"])
    captured = capsys.readouterr()
    assert rc == 0 and captured.out.startswith("time")
    assert "no results of section_samples" in captured.err
    assert cli.main(["export", "-c", str(path), "--start", "2020-01-02", "--end", "2020-01-01"]) == 1
    assert "must be after --start" in capsys.readouterr().err
    assert cli.main(["export", "-c", str(path), "--start", "soon", "--end", "2020-01-01"]) == 1
    assert "--start: time 'soon' is not an ISO 8601 date or time" in capsys.readouterr().err
    # a day/month date is refused, not read month first (05/02 could be 5 February or 2 May)
    assert cli.main(["export", "-c", str(path), "--start", "05/02/2020", "--end", "2020-06-01"]) == 1
    err = capsys.readouterr().err
    assert "2020-02-05 (5 February)" in err and "2020-05-02 (2 May)" in err


def test_to_csv_text_formats_times_in_utc():
    idx = pd.DatetimeIndex(["2026-05-04T12:00:00+02:00"])
    assert (
        export_cmd.to_csv_text(pd.DataFrame({"a": [1.5]}, index=idx)) == "time,a\n2026-05-04T10:00:00Z,1.5\n"
    )


def test_plausible_table_covers_every_role():
    from isentrope.daemon.roles import ROLES

    assert set(check_cmd.PLAUSIBLE) | set(check_cmd.PLAUSIBLE_PER_RATING) == set(ROLES)


# --- the same commands against real InfluxDB servers ---------------------------------------
@pytest.mark.influx
@pytest.mark.parametrize("api", ["influx1", "influx2"])
def test_import_then_check_against_a_real_server(request, tmp_path, capsys, monkeypatch, api):
    server = request.getfixturevalue("influxdb_v1" if api == "influx1" else "influxdb_v2")
    db = server.new_database("clitools")
    if api == "influx1":
        store = f'[store]\nkind = "influx1"\nurl = "{server.url}"\ndatabase = "{db}"\n'
    else:  # influxd 1.8: org ignored, bucket "db/rp", token empty with auth off (see conftest)
        monkeypatch.setenv("ISEN_V2_TOKEN", "-")
        store = (
            f'[store]\nkind = "influx2"\nurl = "{server.url}"\norg = "any"\n'
            f'bucket = "{server.bucket(db)}"\ntoken = "${{ISEN_V2_TOKEN}}"\n'
        )
    path = write_config(tmp_path, store=store)
    frame = plant_frame(END - pd.Timedelta("6h"), 360)
    csv = tmp_path / "six_hours.csv"
    wide = frame.rename(columns={role: PLANT[role][0] for role in PLANT}).astype(object)
    wide.index = wide.index.strftime("%Y-%m-%dT%H:%M:%SZ")
    wide.iloc[10, 0] = "Bad"  # a historian status string: left out, counted, its line named
    wide.to_csv(csv)
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 0
    out = capsys.readouterr().out
    assert "rows read: 360" in out and "samples written: 3599" in out
    assert (
        "values not a number, left out (not written; a value already stored stays): 1; "
        "e.g. six_hours.csv line 12 U7-MS-P 'Bad'"
    ) in out
    rc = cli.main(["check", "-c", str(path), "--end", END.isoformat(), "--since", "6h"])
    out = capsys.readouterr().out
    assert rc == 0, out
    row = next(line for line in out.splitlines() if line.startswith("throttle_p"))
    assert row.split()[3] == "359" and row.endswith(" ok")


# --- import-csv: one date order per file; command-line times ISO 8601 only ----------------------
# The readings of the dates below are calendar facts (common practice, no source): 02/05/2025 is
# 2 May 2025 read day first (day/month/year) and 5 February 2025 read month first
# (month/day/year); 13/05/2025 can only be 13 May, 05/14/2025 only 14 May. The throttle values
# are invented demo values.
FEB5 = "2025-02-05T10:00:00+00:00"


def store_with_feb5(tmp_path: Path) -> Path:
    """A store holding one good throttle pressure at 5 February 2025 10:00 UTC (16.5 MPa)."""
    path = write_config(tmp_path)
    config = load_config(path)
    with config.store.open() as store:
        store.write_raw(
            list(config.mappings),
            pd.DataFrame({"throttle_p": [16.5]}, index=pd.DatetimeIndex([pd.Timestamp(FEB5)], name="time")),
        )
    return path


def stored_throttle(path: Path) -> dict[str, float]:
    config = load_config(path)
    with config.store.open() as store:
        got = store.read_raw(
            list(config.mappings), pd.Timestamp("2024-01-01T00:00Z"), pd.Timestamp("2027-01-01T00:00Z")
        )
    return {t.isoformat(): v for t, v in got["throttle_p"].dropna().items()}


def wide_csv(tmp_path: Path, name: str, rows: list[str], header: str = "time,U7-MS-P") -> Path:
    csv = tmp_path / name
    csv.write_text("\n".join([header, *rows]) + "\n")
    return csv


@pytest.mark.parametrize(
    "rows, expected, evidence",
    [
        # the review's file: 02/05 was stored at 5 February (over the good sample), 13/05 at 13 May
        (
            ["02/05/2025 10:00,16.61", "13/05/2025 10:00,16.62"],
            {"2025-05-02T10:00:00+00:00": 16.61, "2025-05-13T10:00:00+00:00": 16.62},
            "line 3 '13/05/2025 10:00'",
        ),
        # the review's midnight: 12/04 23:58 was stored at 4 December, 13/04 00:00 at 13 April
        (
            ["12/04/2025 23:58,16.61", "12/04/2025 23:59,16.62", "13/04/2025 00:00,16.63"],
            {
                "2025-04-12T23:58:00+00:00": 16.61,
                "2025-04-12T23:59:00+00:00": 16.62,
                "2025-04-13T00:00:00+00:00": 16.63,
            },
            "line 4 '13/04/2025 00:00'",
        ),
    ],
)
def test_import_reads_all_dates_of_a_file_in_one_order(tmp_path, capsys, rows, expected, evidence):
    path = store_with_feb5(tmp_path)
    csv = wide_csv(tmp_path, "dayfirst.csv", rows)
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 0
    assert stored_throttle(path) == {FEB5: 16.5, **expected}
    assert f"dates in dayfirst.csv: day/month/year, as {evidence} shows" in capsys.readouterr().out


@pytest.mark.parametrize(
    "rows, readings, option, expected",
    [
        (
            ["02/05/2025 10:00,16.61", "03/05/2025 10:00,16.62"],
            "2025-05-02 as day/month/year, 2025-02-05",
            "--dayfirst",
            {"2025-05-02T10:00:00+00:00": 16.61, "2025-05-03T10:00:00+00:00": 16.62},
        ),
        # dotted dates were read as 2 May without a word
        (
            ["05.02.2025 11:00,16.61", "06.02.2025 11:00,16.62"],
            "2025-02-05 as day/month/year, 2025-05-02",
            "--monthfirst",
            {"2025-05-02T11:00:00+00:00": 16.61, "2025-06-02T11:00:00+00:00": 16.62},
        ),
        (
            ["05.02.2025 11:00,16.61", "06.02.2025 11:00,16.62"],
            "2025-02-05 as day/month/year, 2025-05-02",
            "--dayfirst",
            {"2025-02-05T11:00:00+00:00": 16.61, "2025-02-06T11:00:00+00:00": 16.62},
        ),
    ],
)
def test_import_refuses_dates_that_read_both_ways_until_told(
    tmp_path, capsys, rows, readings, option, expected
):
    path = store_with_feb5(tmp_path)
    good = wide_csv(tmp_path, "a_iso.csv", ["2025-06-01T10:00Z,16.7"])
    csv = wide_csv(tmp_path, "b_ambiguous.csv", rows)
    assert cli.main(["import-csv", "-c", str(path), str(good), str(csv)]) == 1
    captured = capsys.readouterr()
    first = rows[0].split(",")[0]
    assert captured.err == (
        f"isentrope: error: {csv}: the dates read both ways, such as line 2 '{first}' "
        f"({readings} as month/day/year), and none tells which; say which with --dayfirst "
        "or --monthfirst (nothing was written)\n"
    )
    assert captured.out == ""
    assert stored_throttle(path) == {FEB5: 16.5}  # nothing written, not even the unambiguous file
    assert cli.main(["import-csv", "-c", str(path), str(csv), option]) == 0
    out = capsys.readouterr().out
    assert (
        f"dates in b_ambiguous.csv: {'day/month/year' if option == '--dayfirst' else 'month/day/year'} ({option})"
        in out
    )
    assert stored_throttle(path) == {FEB5: 16.5, **expected}


def test_import_refuses_a_file_that_mixes_date_orders(tmp_path, capsys):
    path = store_with_feb5(tmp_path)
    csv = wide_csv(
        tmp_path,
        "mixed.csv",
        [
            "13/05/2025 10:00,16.61",
            "02/05/2025 11:00,16.62",
            "05/14/2025 10:00,16.63",
            "14/05/2025 10:00,16.64",
        ],
    )
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 1
    err = capsys.readouterr().err
    assert err == (
        f"isentrope: error: {csv}: the dates mix two orders: lines 2, 5 (such as '13/05/2025 10:00') "
        "read only as day/month/year, line 4 (such as '05/14/2025 10:00') only as month/day/year; "
        "correct the file, or import each part with --dayfirst or --monthfirst (nothing was written)\n"
    )
    assert stored_throttle(path) == {FEB5: 16.5}
    # told the order, the rows that do not fit it are rejected with their lines, the rest written
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--dayfirst"]) == 0
    out = capsys.readouterr().out
    assert "rows rejected: 1 (1 not a day/month/year date); e.g. mixed.csv line 4 '05/14/2025 10:00'" in out
    assert stored_throttle(path) == {
        FEB5: 16.5,
        "2025-05-02T11:00:00+00:00": 16.62,
        "2025-05-13T10:00:00+00:00": 16.61,
        "2025-05-14T10:00:00+00:00": 16.64,
    }


def test_import_iso_times_need_no_option(tmp_path, capsys):
    # CEST = UTC+2 on 2 May 2025 (EU rule, Directive 2000/84/EC); a date alone is local midnight
    path = store_with_feb5(tmp_path)
    csv = wide_csv(
        tmp_path,
        "iso.csv",
        [
            "2025-05-02T10:00,1",
            "2025-05-02 11:00Z,2",
            "2025-05-02T14:00+02:00,3",
            "2025-05-03,4",
            "2025-05-02T13:00:30.5-0100,5",
        ],
    )
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--timezone", "Europe/Berlin"]) == 0
    assert stored_throttle(path) == {
        FEB5: 16.5,
        "2025-05-02T08:00:00+00:00": 1.0,
        "2025-05-02T11:00:00+00:00": 2.0,
        "2025-05-02T12:00:00+00:00": 3.0,
        "2025-05-02T22:00:00+00:00": 4.0,
        "2025-05-02T14:00:30.500000+00:00": 5.0,
    }
    out = capsys.readouterr().out
    assert "rows rejected: 0" in out and "dates in" not in out


def test_import_other_time_forms_need_an_explicit_format(tmp_path, capsys):
    path = store_with_feb5(tmp_path)
    csv = wide_csv(tmp_path, "names.csv", ["02-May-2025 10:00,16.61", "03-May-2025 10:00,16.62"])
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 1
    captured = capsys.readouterr()
    assert (
        "rows rejected: 2 (2 unreadable time); e.g. names.csv line 2 '02-May-2025 10:00', line 3 "
        in captured.out
    )
    assert (
        "times must be ISO 8601 (2025-05-02T10:00), or day/month/year or month/day/year numbers with a "
        "four-digit year; give --time-format for any other form"
    ) in captured.out
    assert captured.err.startswith("isentrope: error: no sample written")
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--time-format", "%d-%b-%Y %H:%M"]) == 0
    assert "times in names.csv: --time-format '%d-%b-%Y %H:%M'" in capsys.readouterr().out
    assert stored_throttle(path) == {
        FEB5: 16.5,
        "2025-05-02T10:00:00+00:00": 16.61,
        "2025-05-03T10:00:00+00:00": 16.62,
    }
    assert cli.main(["import-csv", "-c", str(path), str(csv), "--time-format", "%H:%M"]) == 1
    assert capsys.readouterr().err.startswith(
        "isentrope: error: --time-format '%H:%M' must give the year, month and day"
    )
    with pytest.raises(SystemExit) as stop:  # one way of reading the dates only
        cli.main(["import-csv", "-c", str(path), str(csv), "--dayfirst", "--monthfirst"])
    assert stop.value.code == 2
    capsys.readouterr()


def test_import_exits_non_zero_when_nothing_is_written_and_keeps_what_is_stored(tmp_path, capsys):
    path = store_with_feb5(tmp_path)
    csv = wide_csv(tmp_path, "bad.csv", ["2025-02-05T10:00Z,Bad", "2025-02-05T10:01Z,I/O Timeout"])
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 1
    captured = capsys.readouterr()
    assert (
        "values not a number, left out (not written; a value already stored stays): 2; "
        "e.g. bad.csv line 2 U7-MS-P 'Bad', line 3 U7-MS-P 'I/O Timeout'"
    ) in captured.out.splitlines()
    assert "samples written: 0" in captured.out
    assert captured.err == (
        "isentrope: error: no sample written: every value was rejected, empty or of a tag "
        "not in the configuration (what was stored stays)\n"
    )
    assert stored_throttle(path) == {FEB5: 16.5}  # "Bad" at 10:00 left the stored 16.5 alone


def test_import_names_the_lines_of_a_few_rejected_rows(tmp_path, capsys):
    path = write_config(tmp_path)
    csv = wide_csv(
        tmp_path,
        "some.csv",
        ["2025-05-02T10:00Z,16.5", "", *(f"junk {i},16.5" for i in range(5)), "2025-05-02T10:01Z,16.6"],
    )
    assert cli.main(["import-csv", "-c", str(path), str(csv)]) == 0
    out = capsys.readouterr().out
    # the blank line 3 is skipped but counted: the first junk row is line 4
    assert (
        "rows rejected: 5 (5 unreadable time); e.g. some.csv line 4 'junk 0', line 5 'junk 1', "
        "line 6 'junk 2'"
    ) in out.splitlines()
    assert "rows read: 7" in out and "samples written: 2" in out


@pytest.mark.parametrize(
    "text, expected",
    [
        ("2025-05-02", "2025-05-02T00:00:00+00:00"),
        ("2025-05-02T10:00", "2025-05-02T10:00:00+00:00"),
        ("2025-05-02 10:00:30", "2025-05-02T10:00:30+00:00"),
        ("2025-05-02T10:00Z", "2025-05-02T10:00:00+00:00"),
        ("2025-05-02T12:00+02:00", "2025-05-02T10:00:00+00:00"),
        ("2025-05-02T05:00:00.25-0500", "2025-05-02T10:00:00.250000+00:00"),
    ],
)
def test_command_line_times_accept_iso_8601(text, expected):
    from isentrope.daemon.timeutil import parse_time

    assert parse_time(text).isoformat() == expected


@pytest.mark.parametrize(
    "text, hint",
    [
        ("05/02/2025", "write 2025-02-05 (5 February) or 2025-05-02 (2 May)"),
        ("05.02.2025 10:00", "write 2025-02-05T10:00 (5 February) or 2025-05-02T10:00 (2 May)"),
        ("13/05/2025", "write 2025-05-13 (13 May)"),
        ("May 2 2025", "write the date year first"),
        ("now", "write the date year first"),
        ("20250502", "write the date year first"),
        ("2025-5-2", "write the date year first"),
        ("2025-05", "write the date year first"),
        ("2025-05-02T25:00", "write the date year first"),
        ("2025-02-30", "write the date year first"),
    ],
)
def test_command_line_times_refuse_other_forms(text, hint):
    from isentrope.daemon.timeutil import parse_time

    with pytest.raises(ValueError) as err:
        parse_time(text)
    assert str(err.value).startswith(f"time {text!r} is not an ISO 8601 date or time; {hint}")
    assert str(err.value).endswith(
        "(ISO 8601: 2025-05-02, 2025-05-02T10:00, 2025-05-02T10:00Z or "
        "2025-05-02T10:00+02:00; without an offset the time is UTC)"
    )


def test_backfill_refuses_a_slash_date(tmp_path, capsys):
    path = write_config(tmp_path)
    assert cli.main(["backfill", "-c", str(path), "--start", "05/02/2025", "--end", "2025-06-01"]) == 1
    assert capsys.readouterr().err.startswith(
        "isentrope: error: time '05/02/2025' is not an ISO 8601 date or time; "
        "write 2025-02-05 (5 February) or 2025-05-02 (2 May)"
    )
    assert not (tmp_path / "unit7.sqlite").exists()

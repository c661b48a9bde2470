"""Commands through typer's CliRunner: output, exact error text and exit codes."""

from __future__ import annotations

import csv
import json
from pathlib import Path

from typer.testing import CliRunner

from geonorm.cli import app
from geonorm.resolve.index import INDEX_VERSION

runner = CliRunner()


def _write(path, rows):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


def test_lookup_json():
    r = runner.invoke(app, ["lookup", "Lyon", "austin tx", "--json"])
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert [d["country"] for d in data] == ["FR", "US"]
    assert data[1]["subdivision"] == "US-TX"


def test_lookup_table_lists_candidates():
    r = runner.invoke(app, ["lookup", "Lisbon / Berlin"], env={"COLUMNS": "200"})
    assert r.exit_code == 0
    assert "several_countries" in r.stdout and "review" in r.stdout


def test_clean_appends_columns_in_order(tmp_path):
    src, dst = tmp_path / "in.csv", tmp_path / "out.csv"
    _write(
        src,
        [
            ["id", "where", "note"],
            ["1", "München", "007"],
            ["2", "", "1e5"],
            ["3", "localhost", "TRUE"],
            ["4", "München", ""],
        ],
    )
    r = runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "where",
            "--out",
            str(dst),
            "--cache",
            str(tmp_path / "c.sqlite"),
        ],
    )
    assert r.exit_code == 0, r.output
    rows = list(csv.reader(open(dst, encoding="utf-8", newline="")))
    assert rows[0] == [
        "id",
        "where",
        "note",
        "geo_country",
        "geo_subdivision",
        "geo_city",
        "geo_lat",
        "geo_lon",
        "geo_confidence",
        "geo_reason",
        "geo_status",
    ]
    assert [r[:3] for r in rows[1:]] == [
        ["1", "München", "007"],
        ["2", "", "1e5"],
        ["3", "localhost", "TRUE"],
        ["4", "München", ""],
    ]
    assert rows[1][3:6] == ["DE", "DE-BY", "Munich"]
    assert rows[2][-1] == "not_a_place" and rows[3][-1] == "not_a_place"


def test_second_run_answers_from_cache(tmp_path):
    src = tmp_path / "in.csv"
    _write(src, [["loc"], ["Paris"], ["paris "], ["Tokyo"]])
    args = [
        "clean",
        str(src),
        "--column",
        "loc",
        "--out",
        str(tmp_path / "o.csv"),
        "--cache",
        str(tmp_path / "c.db"),
    ]
    first = runner.invoke(app, args)
    second = runner.invoke(app, args)
    assert "0 from the cache" in first.stderr
    assert "2 distinct strings (2 from the cache)" in second.stderr


def test_missing_column_lists_columns(tmp_path):
    src = tmp_path / "in.csv"
    _write(src, [["id", "location_text"], ["1", "Oslo"]])
    r = runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "location",
            "--out",
            str(tmp_path / "o.csv"),
            "--cache",
            str(tmp_path / "c.db"),
        ],
    )
    assert r.exit_code == 1
    assert r.stderr == (
        f"Error: column 'location' is not in {src}; its columns are: id, location_text\n"
        "Hint: did you mean --column 'location_text'? pass the name of the location column "
        "with --column\n"
    )
    assert not (tmp_path / "o.csv").exists()


def test_missing_file(tmp_path):
    r = runner.invoke(
        app,
        ["clean", str(tmp_path / "nope.csv"), "--column", "x", "--out", str(tmp_path / "o.csv")],
    )
    assert r.exit_code == 1
    assert r.stderr.startswith(f"Error: input file {tmp_path / 'nope.csv'} does not exist\n")


def test_empty_file(tmp_path):
    src = tmp_path / "empty.csv"
    src.write_text("")
    r = runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "x",
            "--out",
            str(tmp_path / "o.csv"),
            "--cache",
            str(tmp_path / "c.db"),
        ],
    )
    assert r.exit_code == 1
    assert r.stderr == f"Error: {src} is empty\nHint: pass a file with a header line and rows\n"


def test_wrong_encoding_suggests_option(tmp_path):
    src = tmp_path / "latin.csv"
    src.write_bytes("loc\nS\xe3o Paulo\n".encode("latin-1"))
    r = runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "loc",
            "--out",
            str(tmp_path / "o.csv"),
            "--cache",
            str(tmp_path / "c.db"),
        ],
    )
    assert r.exit_code == 1
    assert "--encoding" in r.stderr
    ok = runner.invoke(
        app,
        [
            "clean",
            str(src),
            "--column",
            "loc",
            "--out",
            str(tmp_path / "o.csv"),
            "--cache",
            str(tmp_path / "c.db"),
            "--encoding",
            "latin-1",
        ],
    )
    assert ok.exit_code == 0, ok.output


def test_accept_out_of_range_is_refused():
    r = runner.invoke(app, ["lookup", "Paris", "--accept", "1.5"])
    assert r.exit_code == 2


def test_gazetteer_info():
    r = runner.invoke(app, ["gazetteer", "info", "--json"])
    assert r.exit_code == 0, r.output
    meta = json.loads(r.stdout)
    assert int(meta["places_city"]) > 200_000 and meta["index_version"] == str(INDEX_VERSION)


def _leaf_commands():
    """Every command path of the CLI, walked from typer's click group."""
    import typer.main

    def walk(cmd, path):
        if hasattr(cmd, "commands"):
            for name, sub in cmd.commands.items():
                yield from walk(sub, [*path, name])
        else:
            yield path, cmd

    return list(walk(typer.main.get_command(app), []))


def test_every_command_has_help_and_docs():
    commands = _leaf_commands()
    assert len(commands) >= 12
    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    for path, cmd in commands:
        r = runner.invoke(app, [*path, "--help"])
        assert r.exit_code == 0, path
        assert cmd.help and len(cmd.help.strip()) > 20, f"{' '.join(path)} has no help text"
        for param in cmd.params:
            if param.name != "help" and getattr(param, "param_type_name", "") == "option":
                assert param.help, f"{' '.join(path)} {param.opts[0]} has no help"
        assert f"geonorm {' '.join(path)}" in readme, f"README does not show {' '.join(path)}"


def test_quiet_warm_clean_imports_only_what_it_needs(tmp_path):
    """A quiet rerun whose answers are all cached imports neither rich (it prints nothing)
    nor the index builder (the index exists); it writes the same file as the first run."""
    import subprocess
    import sys

    src, cache = tmp_path / "in.csv", tmp_path / "c.sqlite"
    _write(src, [["id", "location"], ["1", "Lyon"], ["2", "austin tx"], ["3", "Lyon"]])
    outs = [tmp_path / "first.csv", tmp_path / "second.csv"]
    code = (
        "import sys\n"
        "from geonorm.cli import app\n"
        "try:\n"
        "    app(sys.argv[1:])\n"
        "except SystemExit as exc:\n"
        "    assert not exc.code, exc.code\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] == 'rich' "
        "or m.startswith('geonorm.resolve.build.') and m != 'geonorm.resolve.build.layout'))\n"
    )
    printed = []
    for out in outs:
        args = ["clean", str(src), "--column", "location", "--out", str(out)]
        done = subprocess.run(
            [sys.executable, "-c", code, *args, "--cache", str(cache), "--quiet"],
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert done.returncode == 0, done.stderr
        printed.append(done.stdout.strip())
    assert printed[1] == "[]"
    assert outs[0].read_bytes() == outs[1].read_bytes()

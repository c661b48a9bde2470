"""The Dask engine: the same answers as a single-machine clean, from a cluster of two processes.

Every cluster here listens on 127.0.0.1 only, without a dashboard.
"""

from __future__ import annotations

import json
import os
import signal
from pathlib import Path

import pytest

pytest.importorskip("distributed")

import pandas as pd
import polars as pl
from distributed import Client, LocalCluster
from typer.testing import CliRunner

import geonorm.batch.dask_engine as dask_engine
import geonorm.dask
from geonorm import InputError, PlaceIndexError, clean_file
from geonorm.batch.cache import Cache
from geonorm.cli import app
from geonorm.progress import ProgressEvent

DEMO = Path(__file__).resolve().parents[1] / "demo_data" / "members.csv"
PARTS = 4
ROWS = 750  # per partition
DECIDED = "Somewhere Decided"  # a text a person decided, in both caches


@pytest.fixture(scope="module")
def client():
    with (
        LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},  # no dashboard, no port 8787
        ) as cluster,
        Client(cluster) as c,
    ):
        yield c


def _decide(cache_path: Path) -> None:
    with Cache(cache_path) as cache:
        cache.put_overrides(
            [
                {
                    "key": "somewhere decided",
                    "text": DECIDED,
                    "country": "IS",
                    "subdivision": "",
                    "city": "",
                    "lat": None,
                    "lon": None,
                    "geonameid": None,
                    "not_a_place": 0,
                    "note": "",
                    "decided_at": "2024-01-01T00:00:00Z",
                    "source": "test",
                }
            ]
        )


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    """Demo rows (repeated strings, empty cells) in four Parquet partitions, and the reference:
    single-machine ``clean_file`` of the same rows with the same cache state."""
    root = tmp_path_factory.mktemp("dask")
    df = pd.read_csv(DEMO, dtype=str, keep_default_na=False, na_values=[""]).iloc[: PARTS * ROWS]
    df = df.assign(n=range(len(df)))  # a typed column, kept as it is
    df.loc[df.index % 97 == 0, "location"] = None
    df.loc[df.index % 101 == 0, "location"] = DECIDED
    (root / "in").mkdir()
    for i in range(PARTS):
        df.iloc[i * ROWS : (i + 1) * ROWS].to_parquet(root / "in" / f"p{i}.parquet", index=False)
    df.to_parquet(root / "all.parquet", index=False)
    _decide(root / "ref.sqlite")
    summary = clean_file(
        root / "all.parquet", "location", root / "ref.parquet", cache=root / "ref.sqlite", workers=1
    )
    return {
        "root": root,
        "input": root / "in",
        "ref": pl.read_parquet(root / "ref.parquet"),
        "distinct": summary.distinct,
    }


def _fresh_cache(path: Path) -> Path:
    path.unlink(missing_ok=True)
    _decide(path)
    return path


def _output(folder: Path) -> pl.DataFrame:
    files = sorted(folder.glob("part-*.parquet"))
    return pl.concat([pl.read_parquet(f) for f in files])


def test_dataset_equals_single_machine_clean_row_for_row(client, data, tmp_path):
    before = sum(client.run(geonorm.dask.resolved_here).values())
    cache = _fresh_cache(tmp_path / "c.sqlite")
    summary = geonorm.dask.clean_dataset(
        data["input"], "location", tmp_path / "out", cache=cache, client=client
    )
    out = _output(tmp_path / "out")
    assert out.equals(data["ref"])
    assert out.filter(pl.col("location") == DECIDED)["geo_reason"].unique().to_list() == [
        "reviewed"
    ]
    # One file per input partition, each with that partition's rows in their order.
    files = sorted((tmp_path / "out").glob("part-*.parquet"))
    assert [f.name for f in files] == [f"part-{i:05d}.parquet" for i in range(PARTS)]
    for i, f in enumerate(files):
        part = pl.read_parquet(data["input"] / f"p{i}.parquet")
        assert pl.read_parquet(f).select(part.columns).equals(part)
    # Each distinct string resolved exactly once, on the workers, and stored by the client.
    resolved = sum(client.run(geonorm.dask.resolved_here).values()) - before
    assert summary.distinct == data["distinct"] == resolved == summary.resolved
    with Cache(cache) as c:
        assert c.count() == summary.distinct
    assert summary.rows == PARTS * ROWS and summary.decided == 1
    # A second run takes everything from the cache and writes the same files.
    again = geonorm.dask.clean_dataset(
        data["input"], "location", tmp_path / "out", cache=cache, client=client
    )
    assert (again.resolved, again.cache_hits) == (0, summary.distinct)
    assert sum(client.run(geonorm.dask.resolved_here).values()) - before == resolved
    assert _output(tmp_path / "out").equals(data["ref"])


def test_clean_frame_is_lazy_and_keeps_partitions(client, data, tmp_path):
    import dask.dataframe as dd

    ddf = dd.read_parquet(sorted(str(p) for p in data["input"].glob("*.parquet")))
    cache = _fresh_cache(tmp_path / "c.sqlite")
    cleaned = geonorm.dask.clean_frame(ddf, "location", cache=cache, accept=0.7)
    assert isinstance(cleaned, dd.DataFrame) and cleaned.npartitions == ddf.npartitions
    assert list(cleaned.columns) == list(data["ref"].columns)
    got = pl.from_pandas(cleaned.compute().reset_index(drop=True))
    assert got.equals(data["ref"].cast(got.schema))


def test_clean_frame_without_a_cluster_resolves_on_this_machine(monkeypatch):
    import dask
    import dask.dataframe as dd

    monkeypatch.setattr(dask_engine, "_default_client", lambda: None)
    values = ["austin tx", None, "München", "austin tx"]
    frame = pd.DataFrame({"location": values, "n": range(4)})
    with dask.config.set(scheduler="sync"):
        got = geonorm.dask.clean_frame(dd.from_pandas(frame, npartitions=2), "location").compute()
    expected = pd.DataFrame(geonorm.resolve_series(values))  # a missing value is empty
    assert list(got.columns) == ["location", "n", *expected.columns]
    pd.testing.assert_frame_equal(got[expected.columns], expected, check_dtype=False)


def test_a_worker_killed_during_resolution_changes_nothing(client, data, tmp_path):
    pids = client.run(os.getpid)
    killed: list[int] = []

    def kill_one(event: ProgressEvent) -> None:
        if event.kind == "advance" and not killed:
            killed.append(next(iter(pids.values())))
            os.kill(killed[0], signal.SIGKILL)  # the nanny starts a new worker process

    engine = geonorm.dask.DaskEngine(client, chunk=50)
    cache = _fresh_cache(tmp_path / "c.sqlite")
    summary = geonorm.dask.clean_dataset(
        data["input"],
        "location",
        tmp_path / "out",
        cache=cache,
        client=client,
        engine=engine,
        progress=kill_one,
    )
    assert killed
    assert _output(tmp_path / "out").equals(data["ref"])
    assert summary.resolved == data["distinct"]
    client.wait_for_workers(2, timeout=60)
    assert killed[0] not in client.run(os.getpid).values()


def test_an_interrupted_client_reruns_from_its_stored_chunks(client, data, tmp_path):
    seen = []

    def stop_after_two_chunks(event: ProgressEvent) -> None:
        if event.kind == "advance":
            seen.append(event.done)
            if len(seen) == 2:
                raise KeyboardInterrupt

    cache = _fresh_cache(tmp_path / "c.sqlite")
    engine = geonorm.dask.DaskEngine(client, chunk=100)
    with pytest.raises(KeyboardInterrupt):
        geonorm.dask.clean_dataset(
            data["input"],
            "location",
            tmp_path / "out",
            cache=cache,
            client=client,
            engine=engine,
            progress=stop_after_two_chunks,
        )
    with Cache(cache) as c:
        stored = c.count()
    assert stored == sum(seen) == 200
    summary = geonorm.dask.clean_dataset(
        data["input"], "location", tmp_path / "out", cache=cache, client=client
    )
    assert (summary.cache_hits, summary.resolved) == (stored, data["distinct"] - stored)
    assert _output(tmp_path / "out").equals(data["ref"])


def _set_resolver_version(value: str) -> str:
    import geonorm.resolve.resolver as resolver_module

    old = resolver_module.RESOLVER_VERSION
    resolver_module.RESOLVER_VERSION = value
    return old


def test_a_worker_with_another_version_stops_the_run(client, data, tmp_path, monkeypatch):
    worker = sorted(client.scheduler_info()["workers"])[0]
    old = client.run(_set_resolver_version, "0.0-other", workers=[worker])[worker]
    try:
        with pytest.raises(InputError) as err:
            geonorm.dask.clean_dataset(
                data["input"],
                "location",
                tmp_path / "out",
                cache=tmp_path / "c.sqlite",
                client=client,
            )
        message = err.value.message
        assert f"worker {worker} runs geonorm" in message
        assert "resolver version 0.0-other+index" in message
        assert f"resolver version {old}+index" in message
        assert "geonorm gazetteer info" in err.value.hint
        # The check inside every task catches a worker that changed after the first check.
        monkeypatch.setattr(dask_engine, "check_workers", lambda *a, **k: 2)
        with pytest.raises(InputError, match=r"runs geonorm .* resolver version 0\.0-other"):
            geonorm.dask.clean_dataset(
                data["input"],
                "location",
                tmp_path / "out2",
                cache=tmp_path / "c2.sqlite",
                client=client,
                engine=geonorm.dask.DaskEngine(client, chunk=10),
            )
    finally:
        client.run(_set_resolver_version, old, workers=[worker])
    assert not list((tmp_path / "out").glob("*.parquet"))


def test_a_worker_without_the_index_is_named(client, data, tmp_path):
    engine = geonorm.dask.DaskEngine(client, index_path=str(tmp_path / "none.sqlite"))
    with pytest.raises(PlaceIndexError, match=r"worker tcp://127\.0\.0\.1:\d+: no place index"):
        geonorm.dask.clean_dataset(
            data["input"], "location", tmp_path / "out", client=client, engine=engine
        )


def test_an_unreachable_scheduler_or_one_without_workers_is_named(data, tmp_path, monkeypatch):
    monkeypatch.setattr(dask_engine, "CONNECT_SECONDS", 1)
    monkeypatch.setattr(dask_engine, "WORKER_WAIT_SECONDS", 1)
    with pytest.raises(
        InputError, match=r"cannot reach the Dask scheduler at tcp://127\.0\.0\.1:1"
    ):
        geonorm.dask.clean_dataset(
            data["input"], "location", tmp_path / "out", scheduler="tcp://127.0.0.1:1"
        )
    with (
        LocalCluster(
            n_workers=0,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
        ) as empty,
        pytest.raises(InputError, match="has no workers") as err,
    ):
        geonorm.dask.clean_dataset(
            data["input"], "location", tmp_path / "out", scheduler=empty.scheduler_address
        )
    assert "dask worker tcp://" in err.value.hint


def test_cli_engine_dask_on_a_scheduler(client, data, tmp_path):
    scheduler = client.scheduler.address
    cache = _fresh_cache(tmp_path / "c.sqlite")
    args = ["clean", str(data["input"]), "--column", "location", "--out", str(tmp_path / "out")]
    report = tmp_path / "run.json"
    args += ["--engine", "dask", "--scheduler", scheduler, "--cache", str(cache)]
    result = CliRunner().invoke(app, [*args, "--report", str(report)])
    assert result.exit_code == 0, result.output
    assert f"{PARTS * ROWS:,} rows, {data['distinct']:,} distinct strings" in result.output
    assert _output(tmp_path / "out").equals(data["ref"])
    summary = json.loads(report.read_text(encoding="utf-8"))
    assert (summary["rows"], summary["distinct"]) == (PARTS * ROWS, data["distinct"])
    assert summary["versions"]["resolver"] == geonorm.Resolver().version


def test_cli_engine_dask_starts_a_local_cluster_for_csv(tmp_path):
    """Without --scheduler a local cluster is started (and closed); CSV is read as text."""
    rows = DEMO.read_text(encoding="utf-8").splitlines()
    header, body = rows[0].replace(",", ";"), [r.replace(",", ";") for r in rows[1:201]]
    (tmp_path / "csv").mkdir()
    for i in range(2):
        part = [header, *body[i * 100 : (i + 1) * 100]]
        (tmp_path / "csv" / f"p{i}.csv").write_text("\n".join(part) + "\n", encoding="utf-8")
    (tmp_path / "all.csv").write_text("\n".join([header, *body]) + "\n", encoding="utf-8")
    clean_file(tmp_path / "all.csv", "location", tmp_path / "ref.parquet", workers=1)
    result = CliRunner().invoke(
        app,
        [
            "clean",
            str(tmp_path / "csv" / "*.csv"),
            "-c",
            "location",
            "-o",
            str(tmp_path / "out"),
            "--engine",
            "dask",
            "--workers",
            "1",
            "--separator",
            ";",
            "--cache",
            str(tmp_path / "c.sqlite"),
            "--quiet",
        ],
    )
    assert result.exit_code == 0, result.output
    out = _output(tmp_path / "out")
    assert out["member_id"].dtype == pl.String  # CSV columns stay text
    assert out.equals(pl.read_parquet(tmp_path / "ref.parquet"))


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (
            ["--scheduler", "tcp://127.0.0.1:1"],
            "Error: --scheduler only applies with --engine dask",
        ),
        (["--engine", "spark"], "Error: unknown engine 'spark'"),
        (
            ["--engine", "dask", "--remote", "x.toml"],
            "Error: --remote do(es) not apply with the Dask engine",
        ),
        (
            ["--engine", "dask", "--report", "run.html", "--bad-lines", "bad.csv"],
            "Error: --bad-lines, --report do(es) not apply with the Dask engine",
        ),
        (["--engine", "dask", "--out", "-"], "Error: the Dask engine writes a folder"),
    ],
)
def test_cli_engine_mistakes(data, tmp_path, extra, message):
    args = ["clean", str(data["input"]), "-c", "location", "-o", str(tmp_path / "out"), *extra]
    result = CliRunner().invoke(app, args)
    assert result.exit_code == 1
    assert message in result.output


def test_bad_inputs_and_output_folders_are_refused(client, data, tmp_path):
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="already holds other files"):
        geonorm.dask.clean_dataset(data["input"], "location", tmp_path / "out", client=client)
    with pytest.raises(InputError, match="holds input files"):
        geonorm.dask.clean_dataset(data["input"], "location", data["input"], client=client)
    with pytest.raises(InputError, match=r"column 'place' is not in .*: member_id, joined"):
        geonorm.dask.clean_dataset(data["input"], "place", tmp_path / "o", client=client)
    clash = tmp_path / "g.parquet"
    pd.DataFrame({"location": ["Oslo"], "geo_city": ["x"]}).to_parquet(clash)
    with pytest.raises(InputError, match=r"g\.parquet already has the columns geo_city"):
        geonorm.dask.clean_dataset(clash, "location", tmp_path / "o", client=client)
    with pytest.raises(InputError, match="matches no Parquet or CSV file"):
        geonorm.dask.clean_dataset(tmp_path / "nothing*", "location", tmp_path / "o", client=client)


def test_the_facade_names_its_api():
    assert geonorm.dask.__all__ == [
        "DaskEngine",
        "check_workers",
        "clean_dataset",
        "clean_frame",
        "resolved_here",
    ]


def test_the_readme_lists_every_clean_option():
    import typer.main

    clean = typer.main.get_command(app).commands["clean"]  # type: ignore[attr-defined]
    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    table = readme[readme.index("The options of `geonorm clean INPUT`") :]
    table = table[: table.index("\n\n", table.index("| option |"))]
    for param in clean.params:
        if getattr(param, "param_type_name", "") == "option" and param.name != "help":
            assert f"`{param.opts[0]}" in table, param.opts[0]
    assert "## More than one machine" in readme or "### More than one machine" in readme

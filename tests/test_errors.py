"""The exception tree: one base class, documented in one place, and a hint on every error."""

from __future__ import annotations

import sqlite3

import pytest
from fixture_server import adapter_file

import geonorm
import geonorm.errors as errors
from geonorm.batch import remote
from geonorm.batch.cache import Cache
from geonorm.batch.remote import TomlAdapter, load_adapter
from geonorm.batch.remote_answer import RemoteAnswer
from geonorm.errors import (
    CacheError,
    GeonormError,
    InputError,
    PlaceIndexError,
    RemoteError,
)
from geonorm.resolve.index import PlaceIndex
from geonorm.review.scoring import score_file

URL = "https://geo.example.invalid/find"


def test_every_error_is_a_geonorm_error_and_documented():
    classes = [getattr(errors, name) for name in errors.__all__]
    assert all(issubclass(c, GeonormError) for c in classes)
    assert {c.__name__ for c in classes} == {
        "GeonormError",
        "InputError",
        "PlaceIndexError",
        "CacheError",
        "RemoteError",
    }
    for cls in classes:  # the module docstring is the one place the tree is described
        assert cls.__name__ in errors.__doc__, cls.__name__
    # Old names keep working.
    assert errors.IndexError_ is PlaceIndexError and geonorm.IndexError_ is PlaceIndexError
    assert remote.RemoteError is RemoteError


def _raised(call) -> GeonormError:
    with pytest.raises(GeonormError) as err:
        call()
    assert err.value.message and err.value.hint, (err.value.message, err.value.hint)
    return err.value


def _adapter(tmp_path, name: str, old: str = "", new: str = "", **kw):
    path = adapter_file(tmp_path / f"{name}.toml", URL, **kw)
    path.write_text(path.read_text().replace(old, new))
    return path


def test_bad_adapter_files_raise_remote_errors_with_hints(tmp_path):
    missing = _raised(lambda: TomlAdapter(tmp_path / "none.toml"))
    assert isinstance(missing, RemoteError) and isinstance(missing.__cause__, OSError)
    assert missing.hint == "pass the path of a TOML adapter file with `remote`"

    latin1 = tmp_path / "latin1.toml"
    latin1.write_bytes('[remote]\nname = "caf\xe9"\n'.encode("latin-1"))
    err = _raised(lambda: TomlAdapter(latin1))
    assert isinstance(err, RemoteError) and str(err) == f"{latin1} is not UTF-8 text (byte 20)"
    assert isinstance(err.__cause__, UnicodeDecodeError)

    bad_toml = _adapter(tmp_path, "syntax", "per_second = 200", "per_second = = 200")
    assert "is not valid TOML" in str(_raised(lambda: TomlAdapter(bad_toml)))

    bad_port = _adapter(tmp_path, "port", URL, "http://[::1/find")
    err = _raised(lambda: TomlAdapter(bad_port))
    assert str(err) == f"{bad_port} line 3: url 'http://[::1/find' is not an http(s) URL"

    header = _adapter(tmp_path, "header", '"X-Api-Key"', '"X Api Key"', key=True)
    err = _raised(lambda: TomlAdapter(header, environ={"TEAM_GEO_KEY": "k"}))
    assert str(err) == f"{header} line 8: key_header 'X Api Key' is not a header name"

    keyed = adapter_file(tmp_path / "keyed.toml", URL, key=True)
    err = _raised(lambda: TomlAdapter(keyed, environ={"TEAM_GEO_KEY": "clé"}))
    assert "TEAM_GEO_KEY holds characters a header cannot carry" in str(err)
    assert "clé" not in str(err) + err.hint  # the secret is never repeated

    err = _raised(lambda: load_adapter("no-such-adapter"))
    assert isinstance(err, RemoteError) and "no remote adapter 'no-such-adapter'" in str(err)


def test_a_missing_or_damaged_index_raises_place_index_error(tmp_path):
    err = _raised(lambda: PlaceIndex(tmp_path / "none.sqlite"))
    assert isinstance(err, PlaceIndexError) and err.hint == "run: geonorm gazetteer build"
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"not a database, just text" * 100)
    err = _raised(lambda: PlaceIndex(junk))
    assert isinstance(err, PlaceIndexError) and isinstance(err.__cause__, sqlite3.DatabaseError)


def test_damaged_cache_entries_raise_cache_error(tmp_path):
    err = _raised(lambda: Cache(tmp_path))  # a folder, not a file
    assert isinstance(err, CacheError)
    with Cache(tmp_path / "c.sqlite") as cache:
        cache.put_remote_answer("svc", "zorbaville", RemoteAnswer("no_result"), 1)
        cache.db.execute("UPDATE remote_answer SET answer = '{\"hits\": 3}'")
        err = _raised(lambda: cache.remote_answers("svc", ["zorbaville"]))
    assert isinstance(err, CacheError) and "`refresh`" in err.hint
    assert isinstance(err.__cause__, TypeError)


def test_a_missing_column_raises_input_error(tmp_path):
    src = tmp_path / "labelled.csv"
    src.write_text("location,truth\nParis,FR\n", encoding="utf-8")
    err = _raised(lambda: score_file(src, "place", "truth"))
    assert isinstance(err, InputError)
    assert str(err) == f"column 'place' is not in {src}; its columns are: location, truth"
    assert err.hint == "pass the right name with `column`"

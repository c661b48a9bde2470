"""The layout of the compiled index file, shared by the build and the reader."""

from __future__ import annotations

from pathlib import Path

from ...paths import data_dir

__all__ = ["INDEX_VERSION", "ORIGINS", "ORIGIN_ID", "SCHEMA", "default_index_path"]

INDEX_VERSION = 4

# Name origins, strongest first. Stored as small integers.
ORIGINS = (
    "name",
    "alias",
    "code2",
    "code3",
    "postal",
    "sub_code",
    "alt",
    "translation",
    "lower_sub",
    "adjective",
    "region",
    "short",
)
ORIGIN_ID = {o: i for i, o in enumerate(ORIGINS)}

# The statements keep their old spacing: SQLite stores their text in the file.
SCHEMA = """
        PRAGMA journal_mode=OFF; PRAGMA synchronous=OFF;
        CREATE TABLE place(id INTEGER PRIMARY KEY, kind TEXT, cc TEXT, sub TEXT, name TEXT,
                           lat REAL, lon REAL, pop INTEGER, gid INTEGER, fame INTEGER);
        CREATE TABLE name(key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE fuzzy(block TEXT, key TEXT, place INTEGER, origin INTEGER);
        CREATE TABLE nonplace(key TEXT PRIMARY KEY, kind TEXT);
        CREATE TABLE noise(phrase TEXT, position TEXT);
        CREATE TABLE postcode(prefix TEXT PRIMARY KEY, place INTEGER);
        CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT);
        """


def default_index_path() -> Path:
    return data_dir() / f"index-v{INDEX_VERSION}.sqlite"

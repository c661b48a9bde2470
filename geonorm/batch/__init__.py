"""Whole tables: file formats, the cache, the answer pipeline, the remote stage."""

"""A multipart upload streamed to disk under a size cap, never held in memory.

Starlette would spool the whole body to a temporary file before a route sees
it; here the body is parsed as it arrives (python-multipart's streaming
parser) and the part named ``file`` goes straight into the job's folder, so an
upload over the cap is refused after at most the cap's bytes.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

from python_multipart.exceptions import MultipartParseError
from python_multipart.multipart import MultipartParser, parse_options_header
from starlette.requests import Request

from .errors import Invalid, TooLarge

__all__ = ["Upload", "receive_upload"]

_FIELD_BYTES = 64 * 1024  # a form field (column, accept, format) is short


@dataclass
class Upload:
    fields: dict[str, str] = field(default_factory=dict)
    filename: str | None = None  # as the client named it: shown, never used as a path
    size: int = 0
    got_file: bool = False


class _Parts:
    """The parser's callbacks: headers of each part, then its data to a field or the file."""

    def __init__(self, target: Path, cap: int) -> None:
        self.target = target
        self.cap = cap
        self.upload = Upload()
        self.header_field = bytearray()
        self.header_value = bytearray()
        self.headers: dict[str, str] = {}
        self.name = ""
        self.value = bytearray()
        self.sink: IO[bytes] | None = None

    def callbacks(self) -> Any:
        return {
            "on_part_begin": self.part_begin,
            "on_header_field": lambda d, s, e: self.header_field.extend(d[s:e]),
            "on_header_value": lambda d, s, e: self.header_value.extend(d[s:e]),
            "on_header_end": self.header_end,
            "on_headers_finished": self.headers_finished,
            "on_part_data": self.part_data,
            "on_part_end": self.part_end,
        }

    def part_begin(self) -> None:
        self.headers, self.name, self.value = {}, "", bytearray()

    def header_end(self) -> None:
        name = self.header_field.decode("latin-1").strip().lower()
        self.headers[name] = self.header_value.decode("latin-1")
        self.header_field.clear()
        self.header_value.clear()

    def headers_finished(self) -> None:
        _, options = parse_options_header(self.headers.get("content-disposition", ""))
        self.name = options.get(b"name", b"").decode("utf-8", "replace")
        if self.name == "file":
            if self.upload.got_file:
                raise Invalid(
                    "the form has more than one part named file",
                    hint="send one file per job",
                )
            self.upload.got_file = True
            filename = options.get(b"filename")
            self.upload.filename = filename.decode("utf-8", "replace") if filename else None
            self.sink = open(self.target, "wb")  # noqa: SIM115 (closed in part_end or close)

    def part_data(self, data: bytes, start: int, end: int) -> None:
        if self.sink is not None:
            self.upload.size += end - start
            if self.upload.size > self.cap:
                raise TooLarge(
                    f"the file is larger than this service takes ({self.cap // 2**20:,} MB)",
                    hint="split the file, or ask whoever runs the service to raise --max-upload-mb",
                )
            self.sink.write(data[start:end])
        else:
            self.value.extend(data[start:end])
            if len(self.value) > _FIELD_BYTES:
                raise TooLarge(
                    f"the form field {self.name!r} is too long",
                    hint="send the file in the part named file; the other fields are short",
                )

    def part_end(self) -> None:
        if self.sink is not None:
            self.sink.close()
            self.sink = None
        elif self.name:
            self.upload.fields[self.name] = self.value.decode("utf-8", "replace")

    def close(self) -> None:
        if self.sink is not None:
            self.sink.close()
            self.sink = None


async def receive_upload(request: Request, target: Path, cap: int) -> Upload:
    """Parse the multipart body of ``request``, writing its ``file`` part to ``target``."""
    content_type, options = parse_options_header(request.headers.get("content-type", ""))
    boundary = options.get(b"boundary")
    if content_type != b"multipart/form-data" or not boundary:
        raise Invalid(
            "the body is not multipart/form-data",
            hint="send a form with the parts file and column (curl -F file=@members.csv "
            "-F column=location …)",
        )
    length = request.headers.get("content-length", "")
    if length.isdigit() and int(length) > cap + _FIELD_BYTES * 4:
        raise TooLarge(
            f"the upload is larger than this service takes ({cap // 2**20:,} MB)",
            hint="split the file, or ask whoever runs the service to raise --max-upload-mb",
        )
    parts = _Parts(target, cap)
    try:
        parser = MultipartParser(boundary, parts.callbacks())
        async for chunk in request.stream():
            parser.write(chunk)
        parser.finalize()
    except MultipartParseError as exc:
        raise Invalid(
            f"the multipart body is malformed ({exc})",
            hint="send the form as your HTTP client builds it (curl -F, a files= argument)",
        ) from exc
    finally:
        parts.close()
    return parts.upload

"""Turning a file's bytes into text, or a one-line reason why not."""
from __future__ import annotations

import codecs
import io
import os
import stat
import sys
import tokenize
from dataclasses import dataclass

MAX_BYTES = 8 * 1024 * 1024  # larger files are generated data, not hand-written code


@dataclass(frozen=True)
class Source:
    path: str
    text: str  # decoded, newlines as in the file
    encoding: str
    bom: bool
    newline: str  # "\r\n", "\r" or "\n": the file's dominant line ending


class ReadError(Exception):
    """A file that cannot be analysed; the message is the one-line reason."""


def read_bytes(path: str) -> bytes:
    if path == "-":
        return sys.stdin.buffer.read()
    try:
        mode = os.stat(path).st_mode
        if stat.S_ISDIR(mode):
            raise ReadError("is a folder, not a file")
        if not stat.S_ISREG(mode):
            raise ReadError("not a regular file (a pipe, socket or device), skipped")
        with open(path, "rb") as fh:
            data = fh.read(MAX_BYTES + 1)
    except IsADirectoryError:
        raise ReadError("is a folder, not a file") from None
    except OSError as e:
        raise ReadError(f"cannot read: {e.strerror or e}") from None
    if len(data) > MAX_BYTES:
        raise ReadError(f"larger than {MAX_BYTES // (1024 * 1024)} MiB, skipped")
    return data


def decode(path: str, data: bytes) -> Source:
    if b"\0" in data[:8192]:
        raise ReadError("binary file (contains NUL bytes), skipped")
    try:
        encoding, _ = tokenize.detect_encoding(io.BytesIO(data).readline)
    except SyntaxError as e:
        raise ReadError(f"bad coding declaration: {e.msg if hasattr(e, 'msg') else e}") from None
    bom = data.startswith(codecs.BOM_UTF8)
    try:
        text = data.decode("utf-8-sig" if bom else encoding)
    except (UnicodeDecodeError, LookupError) as e:
        reason = e.reason if isinstance(e, UnicodeDecodeError) else str(e)
        raise ReadError(f"cannot decode as {encoding}: {reason}") from None
    crlf, lf = text.count("\r\n"), text.count("\n")
    newline = "\r\n" if crlf and crlf * 2 >= lf else ("\r" if not lf and "\r" in text else "\n")
    return Source(path, text, "utf-8" if bom else encoding, bom, newline)


def physical_lines(text: str) -> list[str]:
    """The lines as Python numbers them (broken at \\r\\n, \\r, \\n), with their line breaks.
    ``str.splitlines`` also breaks at form feeds and other separators, which would shift
    every later line number against the parser's."""
    return io.StringIO(text, newline="").readlines()


def read_source(path: str) -> Source:
    return decode(path, read_bytes(path))


def encode(source: Source, text: str) -> bytes:
    """Bytes for writing ``text`` back with the file's own encoding and BOM."""
    data = text.encode(source.encoding)
    return codecs.BOM_UTF8 + data if source.bom else data

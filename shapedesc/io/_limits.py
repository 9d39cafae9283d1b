"""Size-limited, bomb-safe access to input bytes, shared by the surface and volume readers.

Private helpers: they check a file's size on disk, inflate gzip streams chunk by chunk
while counting (so a stream that inflates past the limit is refused before it is held in
memory), and refuse XML with entity declarations before any parser sees it.
"""

from __future__ import annotations

import zlib
from pathlib import Path

from shapedesc.errors import InputTooLargeError, SurfaceFormatError

GZIP_MAGIC = b"\x1f\x8b"

#: Bytes inflated per step while counting a gzip stream.
_CHUNK = 1 << 20


def _mib(n: int) -> str:
    return f"{n / 2**20:.1f} MiB"


def check_file(path: Path, *, max_bytes: int, kind: str) -> int:
    """Return the size of ``path`` in bytes after checking it exists, is non-empty and small enough."""
    if not path.exists():
        raise FileNotFoundError(f"{path}: no such file; check the path")
    if not path.is_file():
        raise SurfaceFormatError(f"{path}: is not a regular file; give a {kind} file")
    size = path.stat().st_size
    if size == 0:
        raise SurfaceFormatError(
            f"{path}: the file is empty (0 bytes); it cannot be a {kind}. "
            "Re-export it from the tool that made it, or check that the copy finished."
        )
    if size > max_bytes:
        raise InputTooLargeError(
            f"{path}: the file is {_mib(size)}, past the limit of {_mib(max_bytes)}; "
            "raise max_bytes (shapedesc.defaults.MAX_INPUT_BYTES) if this file is genuine."
        )
    return size


def _drain(d, data: bytes, *, limit: int, too_large: str, sink: list | None = None) -> int:
    """Inflate ``data`` with decompressor ``d`` chunk by chunk; return the inflated size.

    Raises InputTooLargeError(``too_large``) as soon as more than ``limit`` bytes come out;
    inflated chunks are appended to ``sink`` when one is given, else dropped.
    """
    total = 0
    buf = data
    while True:
        out = d.decompress(buf, _CHUNK)
        total += len(out)
        if total > limit:
            raise InputTooLargeError(too_large)
        if sink is not None:
            sink.append(out)
        buf = d.unconsumed_tail
        if d.eof or (not buf and not out):
            return total


def _inflate(raw: bytes, *, path: Path, max_bytes: int, keep: bool) -> bytes | int:
    """Inflate all gzip members of ``raw`` chunk by chunk; refuse past ``max_bytes``.

    With ``keep=False`` nothing is kept (returns the inflated size); with ``keep=True`` the
    inflated bytes are returned (only ever called after a counting pass succeeded).
    """
    total = 0
    parts: list[bytes] = []
    data = raw
    while data:
        d = zlib.decompressobj(wbits=31)  # 31: gzip header and trailer
        try:
            total += _drain(
                d, data, limit=max_bytes - total, sink=parts if keep else None,
                too_large=(f"{path}: the gzip stream inflates past the limit of {_mib(max_bytes)} "
                           "(refused without inflating the rest; a file this large is not a "
                           "plausible surface or label volume, it may be a decompression bomb). "
                           "Raise max_bytes if the file is genuine."))
            if not d.eof:
                raise SurfaceFormatError(
                    f"{path}: the gzip stream ends early (truncated file, inflated "
                    f"{total} bytes before the end); re-copy or re-export the file."
                )
        except zlib.error as exc:
            raise SurfaceFormatError(
                f"{path}: the gzip stream is corrupt ({exc}); re-copy or re-export the file."
            ) from None
        data = d.unused_data
        # Padding of NUL bytes after the last member is tolerated (as gzip(1) does).
        if data and not data.startswith(GZIP_MAGIC):
            if data.strip(b"\x00"):
                raise SurfaceFormatError(
                    f"{path}: {len(data)} bytes of trailing garbage after the gzip stream; "
                    "re-copy or re-export the file."
                )
            break
    return b"".join(parts) if keep else total


def read_bytes_limited(path: Path, *, max_bytes: int, kind: str) -> tuple[bytes, bool]:
    """Bytes of ``path``, inflated when it is gzip; refuse past ``max_bytes``.

    Returns
    -------
    data : bytes
        The file's content (inflated if it was gzip-compressed).
    was_gzip : bool
    """
    check_file(path, max_bytes=max_bytes, kind=kind)
    with open(path, "rb") as fh:
        raw = fh.read()
    if not raw.startswith(GZIP_MAGIC):
        return raw, False
    # First pass counts and keeps nothing, so a bomb never reaches memory.
    _inflate(raw, path=path, max_bytes=max_bytes, keep=False)
    data = _inflate(raw, path=path, max_bytes=max_bytes, keep=True)
    if not data:
        raise SurfaceFormatError(
            f"{path}: the gzip stream inflates to 0 bytes; it cannot be a {kind}."
        )
    return data, True


def check_zlib_payload(payload: bytes, *, limit: int, path: Path, what: str) -> None:
    """Refuse a zlib payload (e.g. a GIFTI ``GZipBase64Binary`` array) inflating past ``limit``."""
    try:
        _drain(zlib.decompressobj(), payload, limit=limit,
               too_large=(f"{path}: {what} inflates past {_mib(limit)} (more than its declared "
                          "size allows, or past the input limit); refused without inflating the rest."))
    except zlib.error as exc:
        raise SurfaceFormatError(f"{path}: {what} is corrupt ({exc}); re-export the file.") from None


def refuse_xml_declarations(data: bytes, *, path: Path) -> None:
    """Refuse XML carrying entity declarations or a DOCTYPE internal subset.

    Internal entities are how entity-expansion ("billion laughs") attacks work, so they
    are refused *before* the XML reaches a parser. The plain external DOCTYPE line that
    GIFTI writers put at the top (``<!DOCTYPE GIFTI SYSTEM "...gifti.dtd">``) is accepted:
    it declares nothing and is never fetched.
    """
    declarations = []
    pos = data.find(b"<!")
    while pos >= 0:
        declarations.append(pos)
        pos = data.find(b"<!", pos + 2)
    words = [data[p + 2: p + 64].lstrip().upper() for p in declarations]
    for word in words:
        if word.startswith(b"ENTITY"):
            raise SurfaceFormatError(
                f"{path}: the XML declares entities (<!ENTITY ...>); refused before parsing "
                "because entity expansion can exhaust memory. A GIFTI file needs no entity "
                "declarations: re-export it with a standard GIFTI writer."
            )
    for pos, word in zip(declarations, words):
        if word.startswith(b"DOCTYPE"):
            end = data.find(b">", pos)
            decl = data[pos: end + 1 if end >= 0 else len(data)]
            if b"[" in decl:
                raise SurfaceFormatError(
                    f"{path}: the XML has a DOCTYPE with an internal subset ([...]); refused "
                    "before parsing because it can declare expanding entities. Re-export the "
                    "file with a standard GIFTI writer."
                )

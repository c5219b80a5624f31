"""Split a streamed body into numbered lines without holding more than one line."""

from __future__ import annotations

from collections.abc import AsyncIterator


class LineTooLong(ValueError):
    def __init__(self, number: int, limit: int) -> None:
        super().__init__(f"line {number} is longer than {limit} bytes")
        self.number = number
        self.limit = limit


async def numbered_lines(
    chunks: AsyncIterator[bytes], *, max_line_bytes: int
) -> AsyncIterator[tuple[int, bytes]]:
    """(1-based line number, line without its line ending) for every line, blank ones included."""
    pending = b""
    number = 0
    async for chunk in chunks:
        if not chunk:
            continue
        parts = (pending + chunk).split(b"\n")
        pending = parts.pop()
        for part in parts:
            number += 1
            if len(part) > max_line_bytes:
                raise LineTooLong(number, max_line_bytes)
            yield number, part.removesuffix(b"\r")
        if len(pending) > max_line_bytes:
            raise LineTooLong(number + 1, max_line_bytes)
    if pending:
        yield number + 1, pending.removesuffix(b"\r")

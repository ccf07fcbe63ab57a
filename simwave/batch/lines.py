"""Where a key sits in a TOML text, for error messages that name the line.

:mod:`tomllib` gives the parsed data but no positions, so the line of a key
is found again by scanning the text: first the header of the table the key
belongs to (``[output]``, ``[systems.lp]``, the n-th ``[[inputs]]``), then the
first line in that section that assigns the key (``key =``, also inside an
inline table ``{ key = ... }`` or as a dotted key ``key.sub =``). When the key
is not found there, the first assignment anywhere in the file is taken; when
it is not found at all, no line is given.
"""

from __future__ import annotations

import re
from typing import Sequence

_HEADER = re.compile(r"^\s*\[")


def _part(name: str) -> str:
    """One dotted-key part, bare or quoted."""
    esc = re.escape(name)
    return rf"(?:{esc}|\"{esc}\"|'{esc}')"


class KeyLines:
    """Find the 1-based line of a key in a TOML document.

    Parameters
    ----------
    text : str
        The TOML source.
    """

    def __init__(self, text: str) -> None:
        self.lines = text.splitlines()

    def _header(self, path: Sequence[str | int]) -> int | None:
        """Index of the header line of the table at ``path`` (None when it has no header)."""
        if not path:
            return None
        if isinstance(path[-1], int):
            # n-th element of an array of tables: the n-th ``[[name]]`` header.
            names = [p for p in path[:-1] if isinstance(p, str)]
            dotted = r"\s*\.\s*".join(_part(p) for p in names)
            pat = re.compile(r"^\s*\[\[\s*" + dotted + r"\s*\]\]")
            hits = [i for i, line in enumerate(self.lines) if pat.match(line)]
            return hits[path[-1]] if path[-1] < len(hits) else None
        names = [p for p in path if isinstance(p, str)]
        pat = re.compile(r"^\s*\[\s*" + r"\s*\.\s*".join(_part(p) for p in names) + r"\s*\]")
        for i, line in enumerate(self.lines):
            if pat.match(line):
                return i
        return None

    def _assign(self, key: str, start: int, stop: int) -> int | None:
        pat = re.compile(r"(?:^|[\s{,.])" + _part(key) + r"\s*(?:=|\.)")
        for i in range(start, stop):
            line = self.lines[i]
            if i > start and _HEADER.match(line):
                return None
            code = line.split("#", 1)[0]
            if pat.search(code):
                return i
        return None

    def header_line(self, path: Sequence[str | int]) -> int | None:
        """The 1-based line of the header of the table at ``path``, or None."""
        i = self._header(list(path))
        return None if i is None else i + 1

    def line_of(self, key: str, path: Sequence[str | int] = ()) -> int | None:
        """The 1-based line where ``key`` of the table at ``path`` is set, or None."""
        path = list(path)
        # Try the section of the deepest table along the path that has its own header.
        for depth in range(len(path), 0, -1):
            head = self._header(path[:depth])
            if head is not None:
                # The key may be one level down in an inline or dotted table; search the
                # section for the deepest remaining table name first, then the key.
                start = head
                for name in path[depth:]:
                    if isinstance(name, str):
                        found = self._assign(name, start, len(self.lines))
                        if found is not None:
                            start = found
                hit = self._assign(key, start, len(self.lines))
                if hit is not None:
                    return hit + 1
                break
        else:
            first_header = next(
                (i for i, line in enumerate(self.lines) if _HEADER.match(line)), len(self.lines)
            )
            start = 0
            for name in path:
                if isinstance(name, str):
                    found = self._assign(name, start, first_header)
                    if found is not None:
                        start = found
            hit = self._assign(key, start, first_header)
            if hit is not None:
                return hit + 1
        pat = re.compile(r"(?:^|[\s{,.])" + _part(key) + r"\s*(?:=|\.)")
        for i, line in enumerate(self.lines):
            if pat.search(line.split("#", 1)[0]):
                return i + 1
        return None

    def where(self, source: str, key: str, path: Sequence[str | int] = ()) -> str:
        """``"file, line N"`` (or just ``"file"`` when the line is not found)."""
        line = self.line_of(key, path)
        return f"{source}, line {line}" if line is not None else source

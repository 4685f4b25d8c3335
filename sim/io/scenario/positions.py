"""Where each key of a TOML text is written: one pass over the text gives a map from key path to
line, so that every problem of a reading is located by a look-up (TOML parsers do not report the
positions of keys).

Key paths are document positions: ``("transitions", 2, "rate")`` is the ``rate`` key of the third
``[[transitions]]`` table. Keys of inline tables (``sex_mix = { female = 0.5 }``) are found on the
line of their table; elements of an array are located at the array's key. The scan understands
table headers, arrays of tables, dotted and quoted keys, strings (basic, literal, multi-line) and
values that span lines; on text it cannot follow it simply records less, never fails.
"""

from __future__ import annotations

from ...problems import KeyPath

__all__ = ["KeyLines"]

_BARE = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


class KeyLines:
    """The line (1-based) of every key path of a TOML text, found in one pass.

    Parameters
    ----------
    text : the TOML text (valid TOML; for other text the map is incomplete).
    """

    def __init__(self, text: str) -> None:
        self._lines: dict[KeyPath, int] = {}
        self._counts: dict[KeyPath, int] = {}
        self._scan(text)

    def line_of(self, path: KeyPath) -> int | None:
        """The line of ``path``, else of its nearest enclosing key that is written, else ``None``."""
        path = tuple(path)
        while path:
            line = self._lines.get(path)
            if line is not None:
                return line
            path = path[:-1]
        return None

    def __len__(self) -> int:
        return len(self._lines)

    # ------------------------------------------------------------------ scanning
    def _record(self, path: KeyPath, line: int) -> None:
        self._lines.setdefault(path, line)

    def _resolve(self, parts: list[str]) -> list:
        """A header's dotted name with the current index of each array of tables it passes through."""
        out: list = []
        for part in parts:
            out.append(part)
            count = self._counts.get(tuple(out))
            if count is not None:
                out.append(count - 1)
        return out

    def _scan(self, text: str) -> None:
        table: list = []
        pos, n, line = 0, len(text), 1
        while pos < n:
            ch = text[pos]
            if ch == "\n":
                line += 1
                pos += 1
            elif ch in " \t\r":
                pos += 1
            elif ch == "#":
                pos = _skip_comment(text, pos)
            elif ch == "[":
                is_array = text.startswith("[[", pos)
                pos += 2 if is_array else 1
                parts, pos = _read_key(text, pos)
                pos = text.find("\n", pos)
                pos = n if pos < 0 else pos
                if not parts:
                    continue
                if is_array:
                    base = self._resolve(parts[:-1]) + [parts[-1]]
                    key = tuple(base)
                    self._record(key, line)
                    self._counts[key] = self._counts.get(key, 0) + 1
                    table = [*base, self._counts[key] - 1]
                else:
                    table = self._resolve(parts)
                self._record(tuple(table), line)
            else:
                parts, pos = _read_key(text, pos)
                if not parts or pos >= n or text[pos] != "=":
                    pos = _next_line(text, pos)  # not a key: skip the line
                    continue
                key = (*table, *parts)
                self._record(key, line)
                pos, line = self._value(text, pos + 1, line, key)

    def _value(self, text: str, pos: int, line: int, key: KeyPath) -> tuple[int, int]:
        """Skip one value starting at ``pos``, recording the keys of inline tables inside it."""
        pos = _skip_blank(text, pos)
        if pos >= len(text):
            return pos, line
        ch = text[pos]
        if ch in "\"'":
            end = _skip_string(text, pos)
            return end, line + text.count("\n", pos, end)
        if ch == "{":
            pos += 1
            while pos < len(text):
                pos = _skip_blank(text, pos)
                if pos < len(text) and text[pos] == "}":
                    return pos + 1, line
                parts, pos = _read_key(text, pos)
                if not parts or pos >= len(text) or text[pos] != "=":
                    return _next_line(text, pos), line
                sub = (*key, *parts)
                self._record(sub, line)
                pos, line = self._value(text, pos + 1, line, sub)
                pos = _skip_blank(text, pos)
                if pos < len(text) and text[pos] == ",":
                    pos += 1
            return pos, line
        if ch == "[":
            pos += 1
            index = 0
            while pos < len(text):
                while pos < len(text) and text[pos] in " \t\r\n#":
                    if text[pos] == "#":
                        pos = _skip_comment(text, pos)
                        continue
                    line += text[pos] == "\n"
                    pos += 1
                if pos >= len(text) or text[pos] == "]":
                    return pos + 1, line
                self._record((*key, index), line)
                pos, line = self._value(text, pos, line, (*key, index))
                index += 1
                while pos < len(text) and text[pos] in " \t\r\n,#":
                    if text[pos] == "#":
                        pos = _skip_comment(text, pos)
                        continue
                    line += text[pos] == "\n"
                    pos += 1
            return pos, line
        start = pos  # a number, date, boolean or anything else up to the end of the value
        while pos < len(text) and text[pos] not in ",]}\n#":
            pos += 1
        return (pos, line) if pos > start else (pos + 1, line)


def _skip_blank(text: str, pos: int) -> int:
    while pos < len(text) and text[pos] in " \t":
        pos += 1
    return pos


def _skip_comment(text: str, pos: int) -> int:
    end = text.find("\n", pos)
    return len(text) if end < 0 else end


def _next_line(text: str, pos: int) -> int:
    end = text.find("\n", pos)
    return len(text) if end < 0 else end


def _skip_string(text: str, pos: int) -> int:
    """Position just after the string starting at ``pos`` (basic, literal or multi-line)."""
    quote = text[pos]
    triple = text.startswith(quote * 3, pos)
    if triple:
        end = pos + 3
        while True:
            end = text.find(quote * 3, end)
            if end < 0:
                return len(text)
            if quote == '"' and _escaped(text, end):
                end += 1
                continue
            end += 3
            while end < len(text) and text[end] == quote:  # up to two quotes may end the content
                end += 1
            return end
    end = pos + 1
    while end < len(text) and text[end] != "\n":
        if text[end] == quote and not (quote == '"' and _escaped(text, end)):
            return end + 1
        end += 1
    return end


def _escaped(text: str, pos: int) -> bool:
    slashes = 0
    while pos - slashes - 1 >= 0 and text[pos - slashes - 1] == "\\":
        slashes += 1
    return slashes % 2 == 1


def _read_key(text: str, pos: int) -> tuple[list[str], int]:
    """A (dotted) key starting at ``pos``: its parts and the position after it and the blanks that
    follow; no parts when there is no key there. Ends before ``=`` or ``]``."""
    parts: list[str] = []
    n = len(text)
    while True:
        pos = _skip_blank(text, pos)
        if pos >= n:
            return parts, pos
        ch = text[pos]
        if ch in "\"'":
            end = _skip_string(text, pos)
            raw = text[pos + 1:end - 1]
            parts.append(_unescape(raw) if ch == '"' else raw)
            pos = end
        elif ch in _BARE:
            end = pos
            while end < n and text[end] in _BARE:
                end += 1
            parts.append(text[pos:end])
            pos = end
        else:
            return parts, pos
        pos = _skip_blank(text, pos)
        if pos < n and text[pos] == ".":
            pos += 1
            continue
        if pos < n and text[pos] == "]":
            pos += 1
            if pos < n and text[pos] == "]":
                pos += 1
        return parts, pos


def _unescape(raw: str) -> str:
    if "\\" not in raw:
        return raw
    try:
        return raw.encode("latin-1", "backslashreplace").decode("unicode_escape")
    except UnicodeDecodeError:
        return raw

"""Reading what a user hands us, defensively: files, TOML, XML and paths.

Every function here turns hostile input into a ``SpecError`` naming the file and the field,
never into a traceback or a hang:

- ``read_bytes`` / ``read_text`` open only regular files (``/dev/zero``, a pipe or a folder is
  refused before a byte is read) and read at most a stated number of bytes;
- ``parse_toml`` refuses nesting deeper than ``limits.MAX_TOML_DEPTH`` (``tomllib`` recurses and
  raises ``RecursionError`` on deep input) and integers outside TOML's 64-bit range;
- ``check_xml`` measures an XML document's element nesting and counts its species and reactions
  with expat (iterative, in C) before libsbml, which crashes on deep nesting, sees it; it also
  refuses entity declarations (exponential "billion laughs" expansion);
- ``check_path`` refuses a path libc cannot take (a component over ``NAME_MAX`` bytes, a path
  over ``PATH_MAX``, a NUL byte).
"""

from __future__ import annotations

import os
import re
import stat
import tomllib
from pathlib import Path
from typing import Any

from sweep.spec import limits
from sweep.errors import SpecError


def read_bytes(path: Path, src: str, field: str, limit: int) -> bytes:
    """The content of the regular file ``path``, at most ``limit`` bytes.

    Raises
    ------
    SpecError
        Missing, not a regular file, larger than ``limit``, or unreadable. ``src`` and ``field``
        say where the path came from (the spec, and ``model`` or ``design.file``).
    """
    shown = str(path)
    try:
        # O_NONBLOCK: opening a FIFO must not wait for a writer; regular files ignore the flag
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError as exc:
        raise SpecError(src, field, "cannot read it: file not found", shown, "check the path") from exc
    except (OSError, ValueError) as exc:
        raise SpecError(src, field, f"cannot open the file: {_reason(exc)}", shown) from exc
    try:
        info = os.fstat(fd)
        if not stat.S_ISREG(info.st_mode):
            kind = "a folder" if stat.S_ISDIR(info.st_mode) else "a device, pipe or socket"
            raise SpecError(src, field, f"is {kind}, not a regular file", shown, "name a file")
        if info.st_size > limit:
            raise SpecError(src, field, f"the file is {info.st_size:,} bytes, larger than the "
                            f"{limits.mib(limit)} this reads", shown, "split or shrink it")
        chunks, total = [], 0
        while True:  # the file may grow while it is read: never take more than the limit
            chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            if total > limit:
                raise SpecError(src, field, f"the file is larger than the {limits.mib(limit)} this reads", shown)
        return b"".join(chunks)
    except OSError as exc:
        raise SpecError(src, field, f"cannot read the file: {_reason(exc)}", shown) from exc
    finally:
        os.close(fd)


def read_text(path: Path, src: str, field: str, limit: int) -> str:
    """``read_bytes`` decoded as UTF-8."""
    data = read_bytes(path, src, field, limit)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise SpecError(src, field, f"not UTF-8 text (byte {exc.start:,} is {data[exc.start]:#04x})",
                        str(path), "save the file as UTF-8") from exc


def _reason(exc: BaseException) -> str:
    return exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)


# ---- TOML ------------------------------------------------------------------------------------

def parse_toml(text: str, src: str) -> dict:
    """``tomllib.loads`` with the nesting and integer limits of the module docstring.

    Raises
    ------
    SpecError
        A syntax error (with its line), nesting deeper than ``limits.MAX_TOML_DEPTH``, or an
        integer outside -2**63 .. 2**63 - 1.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(src, "", f"TOML syntax error: {exc}", fix="see https://toml.io for the syntax") from exc
    except (RecursionError, MemoryError) as exc:
        raise SpecError(src, _deep_key(text), f"arrays or tables nested too deeply to read "
                        f"(more than {limits.MAX_TOML_DEPTH} levels)",
                        fix=f"nest at most {limits.MAX_TOML_DEPTH} levels") from exc
    except ValueError as exc:  # an integer of more than 4300 digits (Python's int-to-string limit)
        raise SpecError(src, "", f"cannot read a number: {exc}".split(";")[0],
                        fix="integers run from -2**63 to 2**63 - 1") from exc
    _check_values(doc, src)
    return doc


def _check_values(doc: dict, src: str) -> None:
    """Walk the document without recursion: nesting depth and 64-bit integers."""
    stack: list[tuple[Any, str, int]] = [(doc, "", 0)]
    while stack:
        value, field, depth = stack.pop()
        if isinstance(value, (dict, list)):
            if depth > limits.MAX_TOML_DEPTH:
                raise SpecError(src, field, f"nested more than {limits.MAX_TOML_DEPTH} levels deep",
                                fix=f"nest at most {limits.MAX_TOML_DEPTH} levels of tables and arrays")
            items = value.items() if isinstance(value, dict) else enumerate(value)
            for key, item in items:
                sub = (f"{field}.{key}" if field else str(key)) if isinstance(value, dict) else f"{field}[{key}]"
                stack.append((item, sub, depth + 1))
        elif isinstance(value, int) and not isinstance(value, bool):
            if not limits.INT64_MIN <= value <= limits.INT64_MAX:
                raise SpecError(src, field, "integer out of TOML's 64-bit range", value,
                                "integers run from -2**63 to 2**63 - 1")


_TOKENS = re.compile(r'"""(?:\\.|[^\\])*?"""|\'\'\'.*?\'\'\'|"(?:\\.|[^"\\\n])*"|\'[^\'\n]*\'|#[^\n]*|[\[\]{}]',
                     re.DOTALL)


def _deep_key(text: str) -> str:
    """The key whose value nests too deeply (for the message), or "" if it cannot be told.

    Brackets are counted outside strings and comments; the key is the text before ``=`` on
    the line where the outermost bracket of the deep value opens, under its table header.
    """
    depth, start = 0, 0
    for match in _TOKENS.finditer(text):
        token = match.group()
        if token in "[{":
            if depth == 0:
                start = match.start()
            depth += 1
            if depth > limits.MAX_TOML_DEPTH:
                break
        elif token in "]}":
            depth = max(depth - 1, 0)
    else:
        return ""
    line_start = text.rfind("\n", 0, start) + 1
    key = text[line_start:start].split("=", 1)[0].strip() if "=" in text[line_start:start] else ""
    header = re.findall(r"^\s*\[+\s*([^\[\]\n]+?)\s*\]+", text[:line_start], re.MULTILINE)
    line = text.count("\n", 0, start) + 1
    dotted = ".".join(p for p in (header[-1] if header and key else "", key) if p)
    return f"{dotted} (line {line})" if dotted else f"line {line}"


# ---- XML (SBML) ------------------------------------------------------------------------------

class _TooDeep(Exception):
    pass


def check_xml(text: str, src: str) -> None:
    """Refuse an XML document nested deeper than ``limits.MAX_XML_DEPTH``, declaring entities,
    or holding more species or reactions than ``limits.MAX_SBML_SPECIES`` / ``MAX_SBML_REACTIONS``.

    Malformed XML is left to libsbml, which reports it with line numbers: this stops at the
    first syntax error without complaint.
    """
    from xml.parsers import expat

    parser = expat.ParserCreate(namespace_separator=" ")
    state = {"depth": 0, "species": 0, "reactions": 0}

    def start(name, attrs):
        state["depth"] += 1
        local = name.rsplit(" ", 1)[-1]
        if local in ("species", "reaction"):
            key = "species" if local == "species" else "reactions"
            state[key] += 1
        if state["depth"] > limits.MAX_XML_DEPTH:
            raise _TooDeep(("depth", parser.CurrentLineNumber, local))
        if state["species"] > limits.MAX_SBML_SPECIES or state["reactions"] > limits.MAX_SBML_REACTIONS:
            raise _TooDeep(("count", parser.CurrentLineNumber, local))

    def end(name):
        state["depth"] -= 1

    def entity(name, *rest):
        raise _TooDeep(("entity", parser.CurrentLineNumber, name))

    parser.StartElementHandler = start
    parser.EndElementHandler = end
    parser.EntityDeclHandler = entity
    try:
        parser.Parse(text, True)
    except expat.ExpatError:
        return
    except _TooDeep as exc:
        kind, line, name = exc.args[0]
        where = f"line {line}"
        if kind == "entity":
            raise SpecError(src, where, f"declares the XML entity {name!r}", fix="SBML needs no DTD or entities; "
                            "remove the <!DOCTYPE ...> declarations") from None
        if kind == "depth":
            raise SpecError(src, where, f"<{name}> is nested more than {limits.MAX_XML_DEPTH} elements deep",
                            fix="flatten the math or the annotation there") from None
        what, most = (("species", limits.MAX_SBML_SPECIES) if name == "species"
                      else ("reactions", limits.MAX_SBML_REACTIONS))
        raise SpecError(src, where, f"more than {most:,} {what} in an SBML model", fix=f"at most {most:,}: "
                        "libsbml's validation time grows with the square of the model") from None


# ---- paths -----------------------------------------------------------------------------------

def check_path(path: str | Path, src: str, field: str) -> None:
    """Refuse a path the operating system cannot take, naming the component that is too long.

    Raises
    ------
    SpecError
        A NUL byte, a component longer than ``limits.NAME_MAX`` bytes, or a path longer than
        ``limits.PATH_MAX`` bytes (absolute, as it will be used).
    """
    text = str(path)
    if "\0" in text:
        raise SpecError(src, field, "a path cannot contain a NUL character", text)
    try:
        raw = os.fsencode(text)
    except UnicodeError as exc:
        raise SpecError(src, field, "cannot be written as a file name on this system", text) from exc
    for part in raw.split(b"/"):
        if len(part) > limits.NAME_MAX:
            raise SpecError(src, field, f"a name in the path is {len(part):,} bytes long; the file system "
                            f"takes at most {limits.NAME_MAX}", text, "use a shorter name")
    absolute = len(os.fsencode(os.path.abspath(text)))
    if absolute >= limits.PATH_MAX:
        raise SpecError(src, field, f"the path is {absolute:,} bytes long; the system takes at most "
                        f"{limits.PATH_MAX - 1:,}", text, "use a shorter path")


__all__ = ["check_path", "check_xml", "parse_toml", "read_bytes", "read_text"]

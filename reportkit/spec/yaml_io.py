"""Reading and writing spec YAML, keeping the line number of every key and list item.

ruamel.yaml's round-trip loader records where each key and list item sits in the file,
which is what lets an error say "line 14, model.instruments[1]" (PyYAML drops positions
once the document is built). It builds only plain containers and scalars; a value with
an explicit YAML tag (``!!python/...``, ``!anything``) stays an inert tagged value, which
this module rejects, so nothing in a spec file can construct an arbitrary object.

The parsed document is turned into plain Python values (dict, list, str, int, float,
bool, None) before validation, so the models never see ruamel's own types. Dates written
unquoted (``2024-05-01``) are kept as their ISO text.
"""

from __future__ import annotations

import datetime as dt
import io
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap, CommentedSeq, TaggedScalar
from ruamel.yaml.error import MarkedYAMLError, YAMLError
from ruamel.yaml.scalarstring import DoubleQuotedScalarString, LiteralScalarString

from reportkit.errors import SpecError
from reportkit.spec.loaded import FieldPath, format_field_path

_STR_TAG = "tag:yaml.org,2002:str"
_NULL_TAG = "tag:yaml.org,2002:null"


@dataclass(frozen=True)
class ParsedYaml:
    """A spec document as plain Python values, with 1-based line numbers by field path."""

    data: dict[Any, Any]
    lines: dict[FieldPath, int]


def read_text(path: Path) -> str:
    """The text of a spec file (UTF-8, an optional byte-order mark dropped)."""
    if not path.exists():
        raise SpecError(
            "the spec file does not exist; check the path (it is read relative to the "
            "folder you run the command from) and the spelling of the file name.",
            str(path),
        )
    if path.is_dir():
        raise SpecError(
            "this is a folder, not a spec file; give the path of the YAML spec file itself.",
            str(path),
        )
    try:
        raw = path.read_bytes()
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise SpecError(
            f"the spec file cannot be read ({reason}); check that it exists and that you "
            "have permission to read it.",
            str(path),
        ) from exc
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise SpecError(
            f"the spec file is not UTF-8 text (byte 0x{raw[exc.start]:02x} on line {line} "
            "is not valid UTF-8); save the file with UTF-8 encoding.",
            f"{path.name}, line {line}",
        ) from exc


def parse_yaml(text: str, name: str) -> ParsedYaml:
    """Parse the text of a spec file named ``name`` (used in error messages)."""
    yaml = YAML(typ="rt")
    try:
        document = yaml.load(text)
    except MarkedYAMLError as exc:
        raise _syntax_error(exc, name) from exc
    except YAMLError as exc:
        raise SpecError(
            f"the file is not valid YAML: {exc}. Check the characters it contains.", name
        ) from exc
    if document is None:
        raise SpecError(
            "the spec file is empty; it needs at least the sections study, data and model "
            "(run `reportkit schema` to see every key).",
            name,
        )
    if not isinstance(document, Mapping):
        raise SpecError(
            "the top level of a spec must be a set of sections (study:, data:, model:, ...), "
            f"but this file holds {_kind(document)}; start each section name at the "
            "beginning of a line, followed by a colon.",
            name,
        )
    lines: dict[FieldPath, int] = {}
    data = _plain(document, (), lines, name)
    return ParsedYaml(data=data, lines=lines)


def _syntax_error(exc: MarkedYAMLError, name: str) -> SpecError:
    mark = exc.problem_mark or exc.context_mark
    problem = (exc.problem or exc.context or "syntax error").rstrip(".")
    if "\\t" in problem or "\t" in problem:
        advice = "YAML indents with spaces, never with tabs"
    elif "duplicate key" in problem:
        advice = "a key may appear only once in each section; remove or merge one of them"
    else:
        advice = "check the indentation, colons, brackets and quotes on that line and above it"
    text = f"the file is not valid YAML: {problem}"
    if mark is not None:
        text += f" at line {mark.line + 1}, column {mark.column + 1}"
    if exc.problem and exc.context and exc.context_mark is not None:
        text += f" ({exc.context}, which starts on line {exc.context_mark.line + 1})"
    text += f"; {advice}."
    return SpecError(text, f"{name}, line {mark.line + 1}" if mark is not None else name)


def _kind(value: Any) -> str:
    if isinstance(value, Mapping):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, str):
        return f"the text {value!r}"
    return f"the value {value!r}"


def _line(container: Any, key: Any, item: bool) -> int | None:
    """1-based line of a key (mapping) or an item (sequence), if ruamel recorded it."""
    try:
        pos = container.lc.item(key) if item else container.lc.key(key)
    except (AttributeError, KeyError, IndexError, TypeError):
        return None
    return pos[0] + 1 if pos else None


def _plain(node: Any, path: FieldPath, lines: dict[FieldPath, int], name: str) -> Any:
    """Plain Python values from ruamel's round-trip values; record line numbers on the way."""
    if isinstance(node, CommentedMap | CommentedSeq) and getattr(node.tag, "value", None):
        _reject_tag(node.tag.value, path, lines, name)
    if isinstance(node, Mapping):
        out: dict[Any, Any] = {}
        for raw_key, value in node.items():
            key = _key_text(raw_key)
            if key is None:
                where = _where(name, lines, path)
                raise SpecError(f"keys must be plain names, not {_kind(raw_key)}.", where)
            sub = (*path, key)
            line = _line(node, raw_key, item=False)
            if line is not None:
                lines[sub] = line
            out[key] = _plain(value, sub, lines, name)
        return out
    if isinstance(node, list):
        items = []
        for i, value in enumerate(node):
            line = _line(node, i, item=True)
            if line is not None:
                lines[(*path, i)] = line
            items.append(_plain(value, (*path, i), lines, name))
        return items
    if isinstance(node, TaggedScalar):
        if str(node.tag.value) == _STR_TAG:
            return str(node.value)
        _reject_tag(str(node.tag.value), path, lines, name)
    if isinstance(node, bool | int | float | str) or node is None:
        return _scalar(node)
    if isinstance(node, dt.date):  # also datetime
        return node.isoformat()
    raise SpecError(
        f"this YAML value ({type(node).__name__}) has no place in a spec; write text, a "
        "number, true/false, a list or a mapping.",
        _where(name, lines, path),
    )


def _key_text(key: Any) -> str | None:
    """A mapping key as text: every key of a spec is a name (``2010:`` means '2010')."""
    if isinstance(key, TaggedScalar) and str(key.tag.value) == _STR_TAG:
        return str(key.value)
    if isinstance(key, bool):
        return "true" if key else "false"
    if isinstance(key, str | int | float):
        return str(_scalar(key))
    return None


def _scalar(value: Any) -> Any:
    """Drop ruamel's scalar subclasses (ScalarFloat, ScalarInt, LiteralScalarString...)."""
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        return float(value)
    return str(value)


def _reject_tag(tag: str, path: FieldPath, lines: dict[FieldPath, int], name: str) -> None:
    tag = tag.replace("tag:yaml.org,2002:", "!!")
    raise SpecError(
        f"the YAML tag '{tag}' is not allowed in a spec (a spec holds only plain values); "
        "remove the tag, or put the value in quotes if it is text.",
        _where(name, lines, path),
    )


def _where(name: str, lines: Mapping[FieldPath, int], path: FieldPath) -> str:
    p = tuple(path)
    while p and p not in lines:
        p = p[:-1]
    loc = f"{name}, line {lines[p]}" if p else name
    return f"{loc}, {format_field_path(path)}" if path else loc


def dump_yaml(data: Mapping[str, Any], header: str) -> str:
    """YAML text for plain data, keys in the given order, preceded by a ``# header`` line.

    Sections are written in block style; lists of plain values and the mappings inside
    a list (row filters) in compact flow style; text with line breaks as a literal block;
    text with control or other non-printing characters double-quoted, with escapes.
    The output depends only on ``data``.
    """
    yaml = YAML(typ="rt")
    yaml.width = 88
    yaml.indent(mapping=2, sequence=4, offset=2)
    yaml.representer.add_representer(
        type(None), lambda rep, _value: rep.represent_scalar(_NULL_TAG, "null")
    )
    buffer = io.StringIO()
    buffer.write(f"# {header}\n")
    yaml.dump(_styled(data, in_list=False), buffer)
    return buffer.getvalue()


def _styled(value: Any, in_list: bool) -> Any:
    if isinstance(value, Mapping):
        out = CommentedMap()
        for key, item in value.items():
            out[_styled(key, in_list=True)] = _styled(item, in_list=in_list)
        if in_list:
            out.fa.set_flow_style()
        return out
    if isinstance(value, list | tuple):
        seq = CommentedSeq(_styled(item, in_list=True) for item in value)
        if all(not isinstance(item, Mapping | list | tuple) for item in value):
            seq.fa.set_flow_style()
        return seq
    if isinstance(value, str) and not _printable(value):
        return DoubleQuotedScalarString(value)  # escapes every special character
    if isinstance(value, str) and "\n" in value and not in_list:
        return LiteralScalarString(value)
    return value


def _printable(text: str) -> bool:
    """Safe to write unescaped. ruamel would write other characters raw in plain, quoted
    and literal styles, and then refuse them (control characters) or read them back as
    line breaks (CR, NEL, line separator); only double quotes escape them."""
    return all(ch == "\n" or ch.isprintable() for ch in text)

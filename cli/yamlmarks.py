"""YAML with line marks: parse a spec and remember the line of every key and list item.

Spec errors name the line they come from; this module keeps that bookkeeping apart from the
validation in `spec`.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import yaml

from .errors import SpecError

__all__ = ["KeyPath", "compose_with_lines", "dotted", "line_of"]

KeyPath = tuple[Any, ...]
"""Keys and list positions from the document root to a value."""


def dotted(keys: KeyPath) -> str | None:
    """The key path as written in messages: ``design.offer_probability`` or ``data[2]``."""
    if not keys:
        return None
    text = str(keys[0])
    for k in keys[1:]:
        text += f"[{k + 1}]" if isinstance(k, int) else f".{k}"
    return text


def line_of(lines: Mapping[KeyPath, int], keys: KeyPath) -> int | None:
    """Line of `keys`, or of its nearest enclosing key that has one."""
    while keys:
        if keys in lines:
            return lines[keys]
        keys = keys[:-1]
    return lines.get((), None)


def compose_with_lines(text: str, path: Path) -> tuple[Any, dict[KeyPath, int]]:
    """Parse YAML text into Python data plus the line of every key and list item.

    Every failure is a `SpecError` with its line where one is known: characters YAML does
    not allow (control characters), invalid YAML, nesting too deep to read, and a list or
    mapping repeated through an alias (``*name``), which is refused rather than expanded (a
    few nested aliases can stand for billions of values)."""
    loader = None
    try:
        loader = yaml.SafeLoader(text)
        node = loader.get_single_node()
        if node is None:
            raise SpecError(path, None, None, "the spec is empty",
                            "start from `strativ init DATA`, or give at least 'data' and 'columns'")
        lines: dict[KeyPath, int] = {(): node.start_mark.line + 1}
        _index(loader, node, (), lines, path, set())
        data = loader.construct_document(node)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        problem = exc.problem or exc.context or "invalid YAML"
        raise SpecError(path, mark.line + 1 if mark else None, None,
                        f"not valid YAML: {problem}", _yaml_hint(exc, problem)) from None
    except yaml.reader.ReaderError as exc:
        at = exc.position if isinstance(exc.position, int) else 0
        line = text[:at].count("\n") + 1
        column = at - text.rfind("\n", 0, at)
        code = exc.character if isinstance(exc.character, int) else ord(exc.character or " ")
        raise SpecError(path, line, None, f"the spec holds a character YAML does not allow "
                        f"(0x{code:02x} at column {column})",
                        "remove control characters; a spec is plain text") from None
    except yaml.YAMLError as exc:
        raise SpecError(path, None, None, f"not valid YAML: {exc}") from None
    except RecursionError:
        raise SpecError(path, None, None, "the spec is nested too deeply to read",
                        "a spec needs at most a few levels of lists and mappings") from None
    finally:
        if loader is not None:
            loader.dispose()
    return data, lines


def _yaml_hint(exc: yaml.MarkedYAMLError, problem: str) -> str:
    """Return how to fix the YAML error `exc`."""
    if "\\t" in problem or "\t" in problem:
        return "indent with spaces; YAML does not allow tabs"
    if isinstance(exc, yaml.constructor.ConstructorError):
        return "a spec holds plain values: remove the '!' tag"
    if "another document" in problem:
        return "a spec is a single YAML document: remove the '---' or '...' line"
    return "check the indentation and the ':' after each key"


def _index(loader: yaml.SafeLoader, node: yaml.Node, keys: KeyPath,
           lines: dict[KeyPath, int], path: Path, seen_nodes: set[int]) -> None:
    # An alias repeats a node; a repeated list or mapping is refused: nested aliases can stand
    # for billions of values ("billion laughs") that a message quoting one would spell out.
    if id(node) in seen_nodes:
        if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)):
            raise SpecError(path, node.start_mark.line + 1, dotted(keys),
                            "the spec repeats a list or mapping through an alias (*name)",
                            "write the values out where they are used; a spec does not use "
                            "YAML anchors and aliases for lists and mappings")
        return
    seen_nodes.add(id(node))
    if isinstance(node, yaml.MappingNode):
        loader.flatten_mapping(node)
        seen: dict[Any, int] = {}
        for key_node, value_node in node.value:
            line = key_node.start_mark.line + 1
            if not isinstance(key_node, yaml.ScalarNode):
                raise SpecError(path, line, dotted(keys), "a key must be a plain name")
            key = loader.construct_object(key_node)
            if key in seen:
                raise SpecError(path, line, dotted(keys + (key,)),
                                f"key '{key}' appears twice (lines {seen[key]} and {line})",
                                "keep one of them")
            seen[key] = line
            lines[keys + (key,)] = line
            _index(loader, value_node, keys + (key,), lines, path, seen_nodes)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines[keys + (i,)] = item.start_mark.line + 1
            _index(loader, item, keys + (i,), lines, path, seen_nodes)

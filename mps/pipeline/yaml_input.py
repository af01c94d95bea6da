"""Reading YAML text into plain data, safely and within bounds: the one YAML reader of the pipeline.

``yaml.safe_load`` already refuses Python tags, but a config is hostile input all the same, and
safe loading alone lets the last of two equal keys win without a word, expands aliases without
limit (nested anchors that double at every level, the "billion laughs" pattern), and lets deep
nesting escape as a ``RecursionError``. :func:`read_yaml_file` and :func:`parse_yaml` refuse all of
these with one :class:`~mps.pipeline.errors.ConfigError` line each:

- a file larger than :data:`MAX_BYTES`, or not UTF-8;
- more than one document (``---``) in a file;
- a tag that safe loading refuses (``!!python/object/apply:...``): no code ever runs;
- two explicit keys of one mapping that are equal once read (``J`` twice, ``1`` and ``0x1``,
  ``1`` and ``1.0``), naming the mapping's field path and both lines; keys brought in by a merge
  (``<<: *base``) may be overridden by explicit keys, as YAML defines;
- a list or mapping used as a key;
- more than :data:`MAX_DEPTH` levels of nested lists and mappings, or more than
  :data:`MAX_NODES` values once every alias is expanded (counted on the composed node graph, each
  distinct node once, so counting is linear in the text), or an alias inside its own anchor;
- any other exception PyYAML raises on odd text (a month 13 in a date, ``!!float`` of a word, an
  integer too long to convert), with its line.
"""

from __future__ import annotations

import os
from typing import Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from mps.pipeline.errors import ConfigError
from mps.pipeline.fields import key_text, show, yaml_problem

MAX_BYTES = 1 << 20       # a config is a few kilobytes; per-site lists of long chains fit easily
MAX_NODES = 100_000       # values after alias expansion
MAX_DEPTH = 64            # nested lists and mappings

_MERGE = "tag:yaml.org,2002:merge"
_TAG_REFUSED = "could not determine a constructor for the tag"
# What PyYAML's constructors raise on malformed scalars, beside YAMLError: int("1" * 5000) and dates
# out of range (ValueError), a !!timestamp that is no date (AttributeError), and their kin.
_CONSTRUCT_ERRORS = (ValueError, OverflowError, TypeError, AttributeError, IndexError, KeyError)


def read_yaml_file(path: str | os.PathLike[str]) -> Any:
    """The data of the YAML file at ``path`` (``None`` for an empty file), refusing what the module
    docstring lists; the ``ConfigError`` field is the path."""
    where = str(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_BYTES + 1)
    except FileNotFoundError:
        raise ConfigError(where, "no such config file") from None
    except IsADirectoryError:
        raise ConfigError(where, "is a directory, expected a YAML config file") from None
    except OSError as exc:
        raise ConfigError(where, f"cannot be read ({exc.strerror or exc})") from None
    if len(raw) > MAX_BYTES:
        raise _too_large(where)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise ConfigError(where, "is not UTF-8 text") from None
    return parse_yaml(text, where)


def parse_yaml(text: str, where: str) -> Any:
    """The data of one YAML document in ``text``; refusals are ``ConfigError(where, ...)``."""
    if len(text.encode("utf-8", "surrogatepass")) > MAX_BYTES:
        raise _too_large(where)
    loader = None
    try:
        loader = _Loader(text, where)   # its reader already refuses control characters
        node = loader.single_node()
        if node is None:
            return None
        loader.measure(node)
        return loader.construct_document(node)
    except yaml.constructor.ConstructorError as exc:
        if _TAG_REFUSED in str(exc.problem):
            raise ConfigError(
                where, f"uses a YAML tag that safe loading refuses (plain data only): {yaml_problem(exc)}"
            ) from None
        raise ConfigError(where, f"is not valid YAML: {yaml_problem(exc)}") from None
    except yaml.YAMLError as exc:
        raise ConfigError(where, f"is not valid YAML: {yaml_problem(exc)}") from None
    except RecursionError:  # a last guard: the depth limits below keep PyYAML far from it
        raise ConfigError(where, f"nests too deeply to read (at most {MAX_DEPTH} levels)") from None
    finally:
        if loader is not None:
            loader.dispose()


def _too_large(where: str) -> ConfigError:
    return ConfigError(where, f"is larger than {MAX_BYTES // 1024} KiB; a config is a short text file")


class _Loader(yaml.SafeLoader):
    """PyYAML's safe loader (safe constructors only) with the checks of the module docstring."""

    def __init__(self, text: str, where: str) -> None:
        super().__init__(text)
        self.where = where
        self.depth = 0
        self.composed = 0
        self.paths: dict[int, str] = {}       # id(mapping node) -> its dotted field path
        self.explicit: set[tuple[int, int]] = set()   # (id(mapping), id(pair)) of the pairs written
                                                      # in that mapping (the others are merged in)
        self.measured: dict[int, tuple[int, int]] = {}

    # ------------------------------------------------------------------ composing (text -> nodes)
    def single_node(self) -> Node | None:
        """The document's node graph; a second document is refused by name, not as bad YAML."""
        self.get_event()  # stream start
        node = None if self.check_event(yaml.StreamEndEvent) else self.compose_document()
        if not self.check_event(yaml.StreamEndEvent):
            line = self.peek_event().start_mark.line + 1
            raise ConfigError(self.where, f"holds more than one YAML document (another starts at line "
                                          f"{line}); a config is a single document")
        self.get_event()
        return node

    def compose_node(self, parent: Node | None, index: Any) -> Node:
        self.composed += 1   # written nodes; their expansion through aliases is measured later
        if self.composed > MAX_NODES:
            line = self.peek_event().start_mark.line + 1
            raise ConfigError(self.where, f"holds more than {MAX_NODES} values (line {line}); a config is "
                                          "far smaller")
        nested = self.check_event(yaml.SequenceStartEvent, yaml.MappingStartEvent)
        if nested:
            self.depth += 1
            if self.depth > MAX_DEPTH:
                line = self.peek_event().start_mark.line + 1
                raise ConfigError(self.where, f"nests lists and mappings more than {MAX_DEPTH} deep "
                                              f"(line {line})")
        try:
            return super().compose_node(parent, index)
        finally:
            if nested:
                self.depth -= 1

    # ------------------------------------------------------------------ measuring the node graph
    def measure(self, node: Node, path: str = "", active: set[int] | None = None) -> tuple[int, int]:
        """(values, depth) of ``node`` with every alias expanded, memoised by node so that shared
        subtrees are walked once; refuses a too-large or too-deep expansion and alias cycles.
        Records each mapping's field path and which of its pairs are written there (not merged)."""
        active = set() if active is None else active
        key = id(node)
        if key in self.measured:
            return self.measured[key]
        if key in active:
            raise ConfigError(self.where, f"refers to itself through an alias (line "
                                          f"{node.start_mark.line + 1}), so it never ends")
        active.add(key)
        size, depth = 1, 0
        if isinstance(node, SequenceNode):
            for i, item in enumerate(node.value):
                s, d = self.measure(item, f"{path}[{i}]" if _nested(item) else "", active)
                size, depth = self._grown(node, size + s, max(depth, d + 1))
        elif isinstance(node, MappingNode):
            self.paths.setdefault(key, path)
            for pair in node.value:
                k, v = pair
                if k.tag == _MERGE:   # merged keys land in this mapping: no extra level
                    s, d = self._merged(v, path, active)
                    size, depth = self._grown(node, size + s + 1, max(depth, d))
                    continue
                self.explicit.add((key, id(pair)))
                inner = _join(path, k) if _nested(k) or _nested(v) else ""
                sk, dk = self.measure(k, inner, active)
                sv, dv = self.measure(v, inner, active)
                size, depth = self._grown(node, size + sk + sv, max(depth, dk + 1, dv + 1))
        active.discard(key)
        self.measured[key] = (size, depth)
        return size, depth

    def _merged(self, value: Node, path: str, active: set[int]) -> tuple[int, int]:
        """(values, depth) a merge value ``<<: *a`` or ``<<: [*a, *b]`` adds to its mapping."""
        if isinstance(value, SequenceNode):
            size, depth = 1, 0
            for item in value.value:
                s, d = self._merged(item, path, active) if isinstance(item, MappingNode) \
                    else self.measure(item, path, active)
                size, depth = self._grown(value, size + s, max(depth, d))
            return size, depth
        if isinstance(value, MappingNode):
            self.paths.setdefault(id(value), path)
        return self.measure(value, path, active)

    def _grown(self, node: Node, size: int, depth: int) -> tuple[int, int]:
        """``(size, depth)`` once checked against the limits (checked while a node's children are
        added, so that no walk goes on past the limit)."""
        if size > MAX_NODES:
            raise ConfigError(self.where, f"expands to more than {MAX_NODES} values once its aliases are "
                                          f"resolved (line {node.start_mark.line + 1}); a config is far "
                                          "smaller")
        if depth > MAX_DEPTH:
            raise ConfigError(self.where, f"nests lists and mappings more than {MAX_DEPTH} deep once its "
                                          f"aliases are resolved (line {node.start_mark.line + 1})")
        return size, depth

    # ------------------------------------------------------------------ constructing (nodes -> data)
    def construct_object(self, node: Node, deep: bool = False) -> Any:
        try:
            return super().construct_object(node, deep=deep)
        except _CONSTRUCT_ERRORS as exc:
            tag = str(node.tag).replace("tag:yaml.org,2002:", "!!")
            detail = ""
            if isinstance(exc, ValueError):   # int(), float() and date() say what is wrong
                detail = ": " + " ".join(str(exc).split(";")[0].split())[:120]
            raise ConfigError(self.where, f"holds a value that cannot be read as {tag} (line "
                                          f"{node.start_mark.line + 1}){detail}") from None

    def construct_mapping(self, node: Node, deep: bool = False) -> dict:
        """A dict from a mapping node, refusing repeated explicit keys and unhashable keys."""
        if not isinstance(node, MappingNode):
            return super().construct_mapping(node, deep=deep)   # PyYAML's own refusal
        self.flatten_mapping(node)   # merged pairs first, then the written ones: written ones win
        field = self.paths.get(id(node)) or self.where
        mapping: dict[Any, Any] = {}
        written: dict[Any, Node] = {}
        for pair in node.value:
            key_node, value_node = pair
            key = self.construct_object(key_node, deep=deep)
            try:
                hash(key)
            except TypeError:
                what = {MappingNode: "a mapping", SequenceNode: "a list"}.get(type(key_node), "a set")
                raise ConfigError(field, f"uses {what} as a key (line {key_node.start_mark.line + 1}); "
                                         f"keys are names or numbers") from None
            if (id(node), id(pair)) in self.explicit:
                if key in written:
                    raise ConfigError(field, _repeated(written[key], key_node))
                written[key] = key_node
            mapping[key] = self.construct_object(value_node, deep=deep)
        return mapping


def _nested(node: Node) -> bool:
    return isinstance(node, (MappingNode, SequenceNode))


def _join(path: str, key: Node) -> str:
    """The field path of the value under ``key`` (long or odd keys shortened or escaped)."""
    name = key_text(key.value) if isinstance(key, ScalarNode) else "?"
    return f"{path}.{name}" if path else name


def _repeated(first: Node, second: Node) -> str:
    a, b = first.start_mark.line + 1, second.start_mark.line + 1
    text1, text2 = (show(n.value) if isinstance(n, ScalarNode) else "?" for n in (first, second))
    same = "" if text1 == text2 else f", the second written {text2}"
    return f"key {text1} appears twice (lines {a} and {b}{same})"

"""Safe, strict YAML loading with one-line errors naming the file.

The loader is PyYAML's safe loader (no tags that build Python objects) made strict:

* a key given twice in one mapping is refused with both lines (YAML says keys are unique;
  PyYAML would silently keep the last, e.g. a second ``device:`` line);
* aliases are capped: at most :data:`MAX_ALIASES` of them, and together they may add at most
  :data:`MAX_ALIAS_NODES` nodes once expanded, so a few kB of nested anchors (an "alias bomb")
  is refused after composing the small node graph, before anything is built from it;
* files are read with :func:`noiselab.common.reading.read_input_text` (regular files only,
  bounded size).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from noiselab.common.errors import input_error, quote
from noiselab.common.reading import MAX_INPUT_BYTES, read_input_text

MAX_YAML_BYTES = MAX_INPUT_BYTES
#: Aliases (``*name``) allowed in one document; hand-written configs use a handful.
MAX_ALIASES = 100
#: Nodes that aliases may add once expanded (an expanded alias counts its whole subtree).
MAX_ALIAS_NODES = 10_000
_MERGE_TAG = "tag:yaml.org,2002:merge"


class _RefusedError(Exception):
    """A limit of the strict loader (turned into an InputError by the caller)."""

    def __init__(self, problem: str, allowed: str | None = None) -> None:
        super().__init__(problem)
        self.problem = problem
        self.allowed = allowed


def _loader_class() -> type:
    base = getattr(yaml, "CSafeLoader", None) or yaml.SafeLoader

    class StrictLoader(base):  # type: ignore[misc,valid-type]
        """Safe loader (libyaml when available) that refuses duplicate keys."""

        def construct_mapping(self, node: Any, deep: bool = False) -> Any:
            if isinstance(node, yaml.MappingNode):
                seen: dict[Any, int] = {}
                for key_node, _ in node.value:
                    if key_node.tag == _MERGE_TAG:
                        continue
                    key = self.construct_object(key_node, deep=True)
                    line = key_node.start_mark.line + 1
                    try:
                        first = seen.get(key)
                    except TypeError:
                        continue  # an unhashable key: the base constructor reports it
                    if first is not None:
                        raise _RefusedError(
                            f"key {quote(key)} appears twice (lines {first} and {line})",
                            "each key once in a mapping",
                        )
                    seen[key] = line
            return super().construct_mapping(node, deep=deep)

    return StrictLoader


def _check_aliases(root: Any) -> None:
    """Refuse a node graph with more than MAX_ALIASES aliases, or whose aliases expand to more
    than MAX_ALIAS_NODES extra nodes.

    An alias is a second reference to a composed node. Sizes are memoized per node, so the
    check costs one visit per reference in the file however large the expansion would be."""
    sizes: dict[int, int] = {}
    active: set[int] = set()
    refs = [0]

    def size(node: Any) -> int:
        refs[0] += 1
        key = id(node)
        if key in sizes:
            return sizes[key]
        if key in active:
            raise _RefusedError("a recursive alias (an anchor used inside itself)", "plain YAML")
        active.add(key)
        total = 1
        if isinstance(node, yaml.SequenceNode):
            total += sum(size(child) for child in node.value)
        elif isinstance(node, yaml.MappingNode):
            total += sum(size(k) + size(v) for k, v in node.value)
        active.discard(key)
        sizes[key] = total
        return total

    expanded = size(root)
    aliases = refs[0] - len(sizes)
    if aliases > MAX_ALIASES:
        raise _RefusedError(f"{aliases} aliases (*name)", f"at most {MAX_ALIASES} aliases")
    extra = expanded - len(sizes)
    if extra > MAX_ALIAS_NODES:
        raise _RefusedError(
            f"aliases expand to {extra} extra nodes",
            f"aliases adding at most {MAX_ALIAS_NODES} nodes in all",
        )


def load_yaml_mapping(path: str | Path, what: str = "file") -> dict[str, Any]:
    """Read ``path`` (bounded, regular files only) and return its top-level YAML mapping.

    Raises :class:`~noiselab.common.errors.InputError` for a missing file, anything that is
    not a regular file, an oversized file, non-UTF-8 bytes, invalid YAML, duplicate keys, too
    many aliases, tags that construct Python objects, an empty file or a top level that is
    not a mapping.
    """
    src = str(path)
    text = read_input_text(path, what, MAX_YAML_BYTES)
    return parse_yaml_mapping(text, src, what)


def parse_yaml_mapping(text: str, source: str, what: str = "file") -> dict[str, Any]:
    """Parse YAML text with the strict safe loader and require a mapping at the top level."""
    loader = _loader_class()(text)
    try:
        node = loader.get_single_node()
        data = None
        if node is not None:
            _check_aliases(node)
            data = loader.construct_document(node)
    except _RefusedError as exc:
        raise input_error(source, None, exc.problem, exc.allowed) from None
    except yaml.constructor.ConstructorError as exc:
        tag = getattr(exc, "problem", "") or "unsupported tag"
        line = f" (line {exc.problem_mark.line + 1})" if getattr(exc, "problem_mark", None) else ""
        if "unhashable" in tag:
            raise input_error(source, None, f"not valid YAML{line}: {tag}", "plain keys") from None
        raise input_error(
            source, None, f"YAML tag not allowed{line}: {tag}", "plain YAML"
        ) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or "syntax error"
        raise input_error(source, None, f"not valid YAML{where}: {problem}") from None
    except RecursionError:
        raise input_error(source, None, "YAML nested too deeply") from None
    except (TypeError, ValueError, OverflowError) as exc:  # e.g. an unhashable key
        raise input_error(source, None, f"not valid YAML ({type(exc).__name__})") from None
    finally:
        loader.dispose()
    if data is None:
        raise input_error(source, None, f"{what} is empty", "a YAML mapping of keys")
    if not isinstance(data, dict):
        raise input_error(
            source,
            None,
            f"top level is a {type(data).__name__}, not a mapping",
            "a YAML mapping of keys",
        )
    bad = [k for k in data if not isinstance(k, str)]
    if bad:
        raise input_error(source, quote(bad[0]), "keys must be strings")
    return data

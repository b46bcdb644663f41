"""Read YAML, JSON and TOML that come from outside, with limits on size, nesting depth and alias expansion.

Every structured file archivist did not write itself (an audited archive's
``CITATION.cff``, ``datapackage.json``, ``datacite.json``,
``provenance.json``, its ``archivist.toml``, and the mapper's own manifest)
goes through :func:`load_yaml`, :func:`load_json` or :func:`load_toml`. A file
over a limit raises :class:`LimitExceeded` (an ``ArchivistError``), whose
message is one line naming the file and the limit; a syntax error raises the
parser's own exception (``yaml.YAMLError``, ``json.JSONDecodeError``,
``tomllib.TOMLDecodeError``), as the plain parser would, and a text that is
not UTF-8 raises ``UnicodeDecodeError``.

The caps, and where they come from:

* size: :data:`YAML_MAX_BYTES` 4 MiB, :data:`TOML_MAX_BYTES` 4 MiB,
  :data:`JSON_MAX_BYTES` 64 MiB. Citation files and manifests are kilobytes;
  a Data Package descriptor may inline data, hence the larger cap (common
  practice: the sizes are two orders of magnitude above the largest such files
  seen in data repositories, from memory). The file is never read past its cap.
* depth: :data:`MAX_DEPTH` 128 levels of nested arrays/objects
  (from memory: the default recursion limit of serde_json, Rust's JSON
  library). Python's parsers recurse once per level (``json``'s C scanner,
  ``tomllib`` and PyYAML's composer), and the code that later walks the value
  (``jsonschema``, ``copy.deepcopy``) recurses again, so a document nested
  100 000 deep would end in ``RecursionError``; it ends here instead, in one
  line. TOML dotted keys build deep tables without recursion in the parser,
  which is why the depth is also measured on the parsed value.
* YAML alias expansion: :data:`YAML_MAX_NODES` 1 000 000 nodes once every
  alias is expanded. PyYAML's composer (``yaml/composer.py``,
  ``compose_node``) returns the anchored node itself for each alias, and its
  constructor (``yaml/constructor.py``, ``construct_object``) caches one
  object per node, so parsing an alias bomb is cheap but yields a value shared
  exponentially many times: whatever then walks it as a tree (``str()``,
  ``json.dumps``, a merge key ``<<`` flattened by ``SafeConstructor.
  flatten_mapping``) runs out of memory. The expanded size is counted on the
  composed node graph, before anything is constructed; an alias to a node that
  contains it (a cycle) is refused too. A citation file with a thousand
  references expands to some tens of thousands of nodes (common practice).
* numbers: Python refuses to convert integers longer than 4 300 digits
  (``sys.int_info.default_max_str_digits``); that ``ValueError`` becomes a
  :class:`LimitExceeded` too.

Not covered: limits on the number of keys or the length of one string below
the size cap, and anything XML (spreadsheets are read by openpyxl).
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Any, Callable, Iterable

import yaml

from .errors import ArchivistError
from .filebytes import human_size

MiB = 1024 * 1024
YAML_MAX_BYTES = 4 * MiB
TOML_MAX_BYTES = 4 * MiB
JSON_MAX_BYTES = 64 * MiB
MAX_DEPTH = 128
YAML_MAX_NODES = 1_000_000

__all__ = [
    "LimitExceeded",
    "load_yaml",
    "load_json",
    "load_toml",
    "YAML_MAX_BYTES",
    "TOML_MAX_BYTES",
    "JSON_MAX_BYTES",
    "MAX_DEPTH",
    "YAML_MAX_NODES",
]


class LimitExceeded(ArchivistError):
    """A structured file is over one of the limits above; the message names the file and the limit."""


def _size(n: int) -> str:
    """A cap in words, in the binary units the caps are set in (``64.0 MiB``)."""
    return human_size(n, binary=True)


def _text(source: str | bytes | Path, label: str, max_bytes: int, kind: str) -> str:
    """The text of ``source`` (a path, bytes or text), refused when over ``max_bytes``."""
    if isinstance(source, Path):
        with open(source, "rb") as fh:
            raw = fh.read(max_bytes + 1)
    elif isinstance(source, str):
        raw = source.encode("utf-8")
    else:
        raw = bytes(source)
    if len(raw) > max_bytes:
        raise LimitExceeded(f"{label}: larger than {_size(max_bytes)}, the limit for a {kind} file; not read")
    return raw.decode("utf-8-sig")


def _too_deep(label: str, max_depth: int) -> LimitExceeded:
    return LimitExceeded(f"{label}: nested more than {max_depth} levels deep, over the limit; not read")


def _check_depth(value: Any, label: str, max_depth: int) -> None:
    """Refuse a parsed value nested deeper than ``max_depth`` (walked without recursion)."""
    stack = [(value, 1)]
    while stack:
        item, depth = stack.pop()
        children: Iterable[Any]
        if isinstance(item, dict):
            children = item.values()
        elif isinstance(item, list):
            children = item
        else:
            continue
        if depth > max_depth:
            raise _too_deep(label, max_depth)
        stack.extend((c, depth + 1) for c in children if isinstance(c, (dict, list)))


def _label(source: str | bytes | Path, label: str | None) -> str:
    return label if label is not None else (str(source) if isinstance(source, Path) else "(text)")


def load_json(source: str | bytes | Path, label: str | None = None, *, max_bytes: int = JSON_MAX_BYTES, max_depth: int = MAX_DEPTH) -> Any:
    """Parse JSON from a path, bytes or text within the size and depth limits.

    Raises
    ------
    LimitExceeded
        Over a limit; one line naming ``label`` (default: the path) and the limit.
    json.JSONDecodeError, UnicodeDecodeError, OSError
        Not JSON, not UTF-8, or not readable.
    """
    return _load(source, label, max_bytes, max_depth, "JSON", json.loads, json.JSONDecodeError)


def load_toml(source: str | bytes | Path, label: str | None = None, *, max_bytes: int = TOML_MAX_BYTES, max_depth: int = MAX_DEPTH) -> dict[str, Any]:
    """Parse TOML from a path, bytes or text within the size and depth limits.

    Raises
    ------
    LimitExceeded
        Over a limit; one line naming ``label`` (default: the path) and the limit.
    tomllib.TOMLDecodeError, UnicodeDecodeError, OSError
        Not TOML, not UTF-8, or not readable.
    """
    value: dict[str, Any] = _load(source, label, max_bytes, max_depth, "TOML", tomllib.loads, tomllib.TOMLDecodeError)
    return value


def _load(
    source: str | bytes | Path,
    label: str | None,
    max_bytes: int,
    max_depth: int,
    kind: str,
    parse: Callable[[str], Any],
    syntax_error: type[ValueError],
) -> Any:
    """Read ``source`` within ``max_bytes``, parse it, and check its nesting against ``max_depth``."""
    label = _label(source, label)
    text = _text(source, label, max_bytes, kind)
    try:
        value = parse(text)
    except RecursionError:
        raise _too_deep(label, max_depth) from None
    except syntax_error:
        raise
    except ValueError as exc:  # an integer over Python's digit limit
        raise LimitExceeded(f"{label}: {exc}; not read") from None
    _check_depth(value, label, max_depth)
    return value


def _children(node: yaml.Node) -> list[yaml.Node]:
    if isinstance(node, yaml.SequenceNode):
        return list(node.value)
    if isinstance(node, yaml.MappingNode):
        return [n for pair in node.value for n in pair]
    return []


def _check_nodes(root: yaml.Node, label: str, max_depth: int, max_nodes: int) -> None:
    """Refuse a composed YAML graph whose aliases expand past ``max_nodes``, nest past ``max_depth`` or loop."""
    size: dict[int, int] = {}
    depth: dict[int, int] = {}
    open_: set[int] = set()  # nodes whose children are being counted: meeting one again is a cycle
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    while stack:
        node, closing = stack.pop()
        key = id(node)
        if closing:
            open_.discard(key)
            kids = _children(node)
            size[key] = 1 + sum(size[id(k)] for k in kids)
            depth[key] = 1 + max((depth[id(k)] for k in kids), default=0)
            if size[key] > max_nodes:
                shown = f"{max_nodes:_}".replace("_", " ")
                raise LimitExceeded(f"{label}: its aliases expand to more than {shown} values, over the limit (an alias bomb); not read")
            if depth[key] > max_depth:
                raise _too_deep(label, max_depth)
            continue
        if key in size:
            continue
        if key in open_:
            raise LimitExceeded(f"{label}: an alias refers to a value that contains it (a recursive alias); not read")
        open_.add(key)
        stack.append((node, True))
        stack.extend((k, False) for k in _children(node) if id(k) not in size)


def load_yaml(
    source: str | bytes | Path,
    label: str | None = None,
    *,
    max_bytes: int = YAML_MAX_BYTES,
    max_depth: int = MAX_DEPTH,
    max_nodes: int = YAML_MAX_NODES,
) -> Any:
    """Parse one YAML document safely (PyYAML's ``SafeLoader``) within the size, depth and alias limits.

    Raises
    ------
    LimitExceeded
        Over a limit; one line naming ``label`` (default: the path) and the limit.
    yaml.YAMLError, UnicodeDecodeError, OSError
        Not YAML (or more than one document), not UTF-8, or not readable.
    """
    label = _label(source, label)
    text = _text(source, label, max_bytes, "YAML")
    loader = yaml.SafeLoader(text)
    try:
        node = loader.get_single_node()
        if node is None:
            return None
        _check_nodes(node, label, max_depth, max_nodes)
        return loader.construct_document(node)
    except RecursionError:
        raise _too_deep(label, max_depth) from None
    finally:
        loader.dispose()

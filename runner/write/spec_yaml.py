"""The spec's YAML, read safely before any document is built: limits on depth and on
aliases found from the parser's events alone, mapping keys that may appear once, and the
line of every field (for messages). `spec.py` validates what this reads."""

from __future__ import annotations

import yaml

from ..errors import SpecError

__all__ = ["MAX_DEPTH", "MAX_NODES", "MAX_SPEC_BYTES", "UniqueKeyLoader", "line_map",
           "shape_problem", "stated_missing_words"]

MAX_DEPTH = 32
"""Deepest nesting of mappings and lists a spec may have (real specs use 4 or 5)."""
MAX_NODES = 100_000
"""Most values a spec may hold once every alias (*name) is expanded."""
MAX_SPEC_BYTES = 128 * 1024
"""Longest spec foldwise reads: a larger file is refused unread, a larger stored text is not
read (real specs are a few KiB, and no spec that ran is longer)."""


class UniqueKeyLoader(yaml.SafeLoader):
    """The safe loader, refusing duplicate mapping keys instead of keeping the last."""


def _construct_mapping(loader, node, deep=False):
    seen = {}
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=deep)
        if key in seen:
            raise SpecError(f"duplicate key '{key}' at line {key_node.start_mark.line + 1} "
                            f"(first at line {seen[key]}); each key may appear once — rename "
                            "or remove one of them.")
        seen[key] = key_node.start_mark.line + 1
    return yaml.SafeLoader.construct_mapping(loader, node, deep=deep)


UniqueKeyLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG,
                                _construct_mapping)


def line_map(node, path=(), out=None) -> dict[tuple, int]:
    """Map each field path in a composed YAML tree to its 1-based line."""
    out = {} if out is None else out
    out.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        for k, v in node.value:
            key = k.value
            out[path + (key,)] = k.start_mark.line + 1
            line_map(v, path + (key,), out)
    elif isinstance(node, yaml.SequenceNode):
        for i, v in enumerate(node.value):
            line_map(v, path + (i,), out)
    return out


_FAST_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def shape_problem(text: str) -> str | None:
    """Why the YAML's shape is too costly to build (too deep, or aliases expanding too far),
    found from the parser's events alone, before any node is composed; None if it is fine.

    Each collection's size counts its expanded aliases, so `&a [...]` used many times inside
    other anchors (an alias bomb) is caught while its total is still small. libyaml's parser
    is used where installed (fast, not recursive); a document it rejects is scanned again by
    the pure-Python one, whose syntax error the loader then reports with its line."""
    try:
        return _scan_events(yaml.parse(text, Loader=_FAST_LOADER))
    except yaml.YAMLError:
        pass
    try:
        return _scan_events(yaml.parse(text, Loader=yaml.SafeLoader))
    except yaml.YAMLError:
        return None


def _scan_events(events) -> str | None:
    sizes: dict[str, int] = {}  # anchor -> its expanded number of values
    stack: list[list] = [[None, 0]]  # [anchor, expanded values so far] per open collection
    for event in events:
        if isinstance(event, (yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            stack.append([event.anchor, 1])
            if len(stack) > MAX_DEPTH + 1:
                return (f"at line {event.start_mark.line + 1} lists and mappings are nested "
                        f"more than {MAX_DEPTH} deep; a spec needs 5 or 6 levels. Check the "
                        "brackets and indentation")
            continue
        if isinstance(event, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
            anchor, n = stack.pop()
        elif isinstance(event, yaml.ScalarEvent):
            anchor, n = event.anchor, 1
        elif isinstance(event, yaml.AliasEvent):
            if any(event.anchor == a for a, _ in stack):
                return (f"at line {event.start_mark.line + 1} the alias *{event.anchor} refers "
                        f"to a list or mapping that contains it, which never ends. Refer only "
                        "to anchors defined outside")
            anchor, n = None, sizes.get(event.anchor, 1)
        else:
            continue
        if anchor is not None:
            sizes[anchor] = n
        stack[-1][1] += n
        if stack[-1][1] > MAX_NODES:
            return (f"at line {event.start_mark.line + 1} the document grows beyond "
                    f"{MAX_NODES:,} values once its aliases (*name) are expanded; a spec needs "
                    "far fewer. Write the values out, or reuse an anchor fewer times")
    return None


def stated_missing_words(text: str) -> list[str] | None:
    """The words a stored spec text lists in `data.missing_words`, sorted and once each;
    None where it lists none (pandas' default list). A ValueError where the text cannot say
    (too long or costly, not YAML, no data mapping, not a list of words): a store's spec
    text is another's, read with the same limits as a spec file."""
    if len(text.encode("utf-8", "replace")) > MAX_SPEC_BYTES or shape_problem(text):
        raise ValueError("not a spec foldwise runs")
    try:
        doc = yaml.load(text, Loader=UniqueKeyLoader)
    except (yaml.YAMLError, SpecError, RecursionError):
        raise ValueError("not YAML") from None
    data = doc.get("data") if isinstance(doc, dict) else None
    if not isinstance(data, dict):
        raise ValueError("no data mapping")
    words = data.get("missing_words")
    if words is None:
        return None
    if not isinstance(words, list) or not all(isinstance(w, str) for w in words):
        raise ValueError("not a list of words")
    return sorted(set(words))

"""Size caps for every YAML file kinetome reads, checked before any value is built.

A few hundred bytes of anchors and aliases (``&a [*a, *a]`` nested ten deep) expand
to millions of values: building or walking them takes seconds and gigabytes. The
composed node graph is small, so its expanded size is counted on the graph itself,
each shared node once, and a file over the cap is refused before construction.
"""

from __future__ import annotations

from typing import Any

import yaml

__all__ = ["MAX_YAML_BYTES", "MAX_YAML_VALUES", "YamlTooLarge", "compose_within_limits"]

MAX_YAML_BYTES = 1 << 20  # a spec, chain, variant or config over 1 MiB is surely not one
MAX_YAML_VALUES = 100_000  # values after expanding aliases; our largest file has a few hundred


class YamlTooLarge(ValueError):
    """The text is over a cap; ``line`` (1-based, or None) points at the alias that blew it."""

    def __init__(self, message: str, line: int | None):
        super().__init__(message)
        self.line = line


def compose_within_limits(text: str, loader_class: type[yaml.SafeLoader] = yaml.SafeLoader) -> tuple[yaml.SafeLoader, Any]:
    """(loader, node) for one YAML document in ``text``, node None for an empty one.

    Raises YamlTooLarge over ``MAX_YAML_BYTES`` or ``MAX_YAML_VALUES``, yaml.YAMLError on bad
    syntax. Call ``loader.construct_document(node)`` (or walk the node) and then ``loader.dispose()``.
    """
    size = len(text.encode("utf-8", "replace"))
    if size > MAX_YAML_BYTES:
        raise YamlTooLarge(f"file must be at most {MAX_YAML_BYTES} bytes, got {size}", None)
    loader = loader_class(text)
    try:
        node = loader.get_single_node()
        if node is not None:
            _expanded_size(node, {}, set())
    except RecursionError:
        loader.dispose()
        raise YamlTooLarge("values nested too deeply to read; flatten the structure", None) from None
    except BaseException:
        loader.dispose()
        raise
    return loader, node


def _expanded_size(node: yaml.Node, sizes: dict[int, int], open_nodes: set[int]) -> int:
    """Values under ``node`` with every alias expanded; each distinct node is visited once."""
    key = id(node)
    if key in sizes:
        return sizes[key]
    if key in open_nodes:
        raise YamlTooLarge("an alias refers to a value that contains it (a recursive anchor); write the value out", node.start_mark.line + 1)
    open_nodes.add(key)
    total = 1
    if isinstance(node, yaml.MappingNode):
        children = [child for pair in node.value for child in pair]
    elif isinstance(node, yaml.SequenceNode):
        children = list(node.value)
    else:
        children = []
    for child in children:
        total += _expanded_size(child, sizes, open_nodes)
        if total > MAX_YAML_VALUES:
            raise YamlTooLarge(
                f"expands to more than {MAX_YAML_VALUES} values through anchors and aliases; "
                f"write the values out instead of repeating aliases",
                child.start_mark.line + 1,
            )
    open_nodes.discard(key)
    sizes[key] = total
    return total

"""Sentences that a check and a package file both say, kept in one place so they cannot drift apart."""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from ..project import Layer


def measures_statement(layer: Layer) -> str:
    """What happens to a layer's M values in a package, in one sentence (used by the rule and the package README)."""
    n = layer.measured
    role = layer.role
    return (
        f"{role} layer {layer.source}: {n} feature{'s' if n != 1 else ''} carr{'y' if n != 1 else 'ies'} M (measure) values, "
        f"which archivist does not read; a package made from it holds them only in source/, which keeps the file byte "
        f"for byte: map.gpkg and geojson/{role}.geojson hold the geometries without M"
    )

"""The repair registry: each repair is registered once, by name, with its place in the run.

::

    @repair("snap-edges", order=10, default=True, layer="units")
    def snap_edges(state: RepairState, settings: RepairSettings) -> tuple[list[Change], list[Left]]:
        \"\"\"One-line title.

        What it does, where its thresholds come from, what it never does.
        \"\"\"

The run applies the selected repairs in ascending ``order``. A repair with
``default=False`` runs only when asked for (``build-polygons`` runs with
``--build-polygons`` or ``--only build-polygons``).
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable, Iterable, Protocol, TypeVar

from ..errors import ArchivistError

if TYPE_CHECKING:
    from .model import Change, Left, RepairSettings, RepairState


class Repair(Protocol):
    """What a repair is: a function of the working state and the settings, returning its changes and what it left."""

    __name__: str
    __doc__: str | None

    def __call__(self, state: RepairState, settings: RepairSettings, /) -> tuple[list[Change], list[Left]]: ...


F = TypeVar("F", bound=Repair)

# The modules that register repairs; a module not (yet) in this installation is left out.
REPAIR_MODULES = ("archivist.repair.build", "archivist.repair.polygons", "archivist.repair.lines")


@dataclass(frozen=True)
class RepairInfo:
    """A registered repair: its name, its place in the run, whether it runs by default, the layer it edits."""

    name: str
    order: int
    default: bool
    layer: str
    func: Repair

    @property
    def title(self) -> str:
        return (self.func.__doc__ or "").strip().splitlines()[0] if self.func.__doc__ else self.name


_REGISTRY: dict[str, RepairInfo] = {}


def repair(name: str, *, order: int, default: bool = True, layer: str = "units") -> Callable[[F], F]:
    """Register a repair under ``name`` (kebab-case), run at ``order`` (ascending)."""

    def deco(func: F) -> F:
        if name in _REGISTRY and _REGISTRY[name].func.__qualname__ != getattr(func, "__qualname__", ""):
            raise ValueError(f"repair '{name}' registered twice")
        _REGISTRY[name] = RepairInfo(name, order, default, layer, func)
        return func

    return deco


def load_all() -> None:
    for module in REPAIR_MODULES:
        try:
            importlib.import_module(module)
        except ModuleNotFoundError as exc:
            if exc.name != module:
                raise


def all_repairs() -> list[RepairInfo]:
    """Every registered repair, in run order."""
    load_all()
    return sorted(_REGISTRY.values(), key=lambda r: (r.order, r.name))


def select(only: Iterable[str] = (), skip: Iterable[str] = (), build_polygons: bool = False) -> list[RepairInfo]:
    """The repairs a run applies, in order: ``only`` (if given) else the defaults, minus ``skip``.

    An unknown name is an ArchivistError naming it and the known names.
    """
    known = {r.name: r for r in all_repairs()}
    only, skip = list(only), list(skip)
    for name in only + skip:
        if name not in known:
            raise ArchivistError(f"unknown repair '{name}'; known repairs: {', '.join(known)}")
    chosen = [r for r in known.values() if (r.name in only if only else r.default or (build_polygons and r.name == "build-polygons"))]
    return [r for r in chosen if r.name not in skip]

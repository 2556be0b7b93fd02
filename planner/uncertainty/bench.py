"""The glassware as the numerics see it: which device delivers each stock, how each tube is made up,
the volume grid and the allowances. Built once per job from the plan (``planner.jobs.compile``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..inputs.recipe import Recipe, assemble_recipe
from . import catalogue

MAKE_UP_MODES = ("to-mark", "added")


@dataclass(frozen=True)
class Devices:
    """The glassware that delivers each stock and makes up each tube.

    Attributes
    ----------
    items : one GlasswareItem per dispenser in the plan (plan order).
    stock_device : (k,) index into ``items`` for every stock, −1 for none (e.g. a to-mark diluent).
    flask : the flask each tube is made up in, or None under ``make_up = "added"``.
    """

    items: tuple[catalogue.GlasswareItem, ...]
    stock_device: np.ndarray
    flask: catalogue.GlasswareItem | None


@dataclass(frozen=True)
class TitrationSetup:
    """An in-cuvette titration: ``start_volume_mL`` of stock ``cell`` in the cuvette, aliquots of stock
    ``titrant`` added; the cell never holds more than ``max_volume_mL``; aliquots on a ``step_mL`` grid.
    Each reading is a point of the titration, written as a recipe row: the start volume in the cell's column,
    the titrant added so far in the titrant's column (``make_up = "added"``)."""

    cell: str
    titrant: str
    start_volume_mL: float
    max_volume_mL: float
    step_mL: float
    additions: int
    equilibrate: str


@dataclass(frozen=True)
class Bench:
    """Glassware, make-up and allowances of a plan, in the units the numerics use.

    Attributes
    ----------
    stock_ids : the k stock ids in plan order (the columns of every recipe).
    devices : the dispensers and the make-up flask, looked up in the catalogue.
    make_up : "to-mark" (the diluent fills a flask to the mark) or "added" (every volume dispensed).
    tube_volume_mL : final volume of each tube (its capacity under "added").
    step_mL : the grid volumes are read on.
    min_volume_mL : smallest volume worth dispensing.
    rinse_mL, dead_volume_mL : allowance per used stock for rinsing and what a dispenser keeps.
    delta_T_C : lab temperature minus the glassware's calibration temperature.
    diluent_id : the stock that makes each tube up to volume, or None.
    background_id : the inert-electrolyte stock that levels the ionic strength, or None.
    fixed_mL : stock id -> the same volume in every tube (the plan's design.fixed).
    on_hand_mL : (k,) volume available of each stock, NaN where unstated.
    titration : the in-cuvette titration, or None for separately made tubes.
    make_up_min_mL : under "to-mark", the least diluent each flask must still take, so that it can be
        made up to the mark (the plan's ``glassware.make_up_min``); 0 under "added".
    """

    stock_ids: tuple[str, ...]
    devices: Devices
    make_up: str
    tube_volume_mL: float
    step_mL: float
    min_volume_mL: float
    rinse_mL: float
    dead_volume_mL: float
    delta_T_C: float
    diluent_id: str | None
    background_id: str | None
    fixed_mL: dict[str, float] = field(default_factory=dict, hash=False)
    on_hand_mL: np.ndarray = field(default_factory=lambda: np.zeros(0), hash=False)
    titration: TitrationSetup | None = None
    make_up_min_mL: float = 0.0

    def __repr__(self) -> str:
        return (
            f"Bench({len(self.stock_ids)} stocks, {len(self.devices.items)} dispensers, "
            f"{self.tube_volume_mL:g} mL tubes {self.make_up}, grid {self.step_mL:g} mL)"
        )

    @property
    def to_mark(self) -> bool:
        return self.make_up == "to-mark"

    @property
    def room_mL(self) -> float:
        """Most a tube's dispensed volumes may add up to: the tube less the make-up reserve."""
        return self.tube_volume_mL - (self.make_up_min_mL if self.to_mark and self.diluent_id else 0.0)

    def stock_index(self, sid: str) -> int:
        return self.stock_ids.index(sid)

    def dispensed_ids(self, recipe: Recipe | None = None) -> tuple[str, ...]:
        """Stocks that are measured out (the diluent is not, under ``to-mark``)."""
        ids = recipe.stock_ids if recipe is not None else self.stock_ids
        skip = self.diluent_id if self.to_mark else None
        return tuple(s for s in ids if s != skip)

    def make_recipe(
        self,
        volumes: dict[str, np.ndarray] | np.ndarray,
        tubes: list[str] | None = None,
        *,
        dispensed_ids: tuple[str, ...] | None = None,
    ) -> Recipe:
        """A :class:`Recipe` from dispensed volumes (diluent filled, fixed volumes added, tube checked);
        see :func:`planner.inputs.recipe.make_recipe`."""
        return assemble_recipe(
            self.stock_ids,
            volumes,
            tubes,
            dispensed_ids=dispensed_ids,
            diluent_id=self.diluent_id,
            to_mark=self.to_mark,
            tube_volume_mL=self.tube_volume_mL,
            fixed_mL=self.fixed_mL,
        )

"""Named blocks of a flat vector: the one owner of the decision-vector layout.

A block is a matrix of shape ``(rows, cols)`` stored column-major (CasADi's
order), so a per-knot block of shape ``(n, K)`` keeps knot ``k`` in column
``k``. Every block has a scale: the solver sees ``x = physical / scale``,
which keeps forces (hundreds of newtons) and angles (radians) of one order.
The same class lays out the parameter vector (scale 1).
"""
from __future__ import annotations

from dataclasses import dataclass

import casadi as ca
import numpy as np


@dataclass(frozen=True)
class Block:
    name: str
    offset: int
    rows: int
    cols: int
    scale: float

    @property
    def size(self) -> int:
        return self.rows * self.cols

    @property
    def stop(self) -> int:
        return self.offset + self.size


class VectorLayout:
    """An ordered set of named matrix blocks packed into one flat vector."""

    def __init__(self):
        self._blocks: dict[str, Block] = {}
        self.size = 0

    def add(self, name: str, rows: int = 1, cols: int = 1, scale: float = 1.0) -> Block:
        """Append a block; returns it. Names are unique."""
        if name in self._blocks:
            raise ValueError(f"block '{name}' is already laid out")
        block = Block(name, self.size, int(rows), int(cols), float(scale))
        self._blocks[name] = block
        self.size = block.stop
        return block

    def __contains__(self, name: str) -> bool:
        return name in self._blocks

    def __getitem__(self, name: str) -> Block:
        return self._blocks[name]

    @property
    def blocks(self) -> list[Block]:
        return list(self._blocks.values())

    # -- symbolic --------------------------------------------------------
    def split_symbolic(self, vector) -> dict:
        """Physical-unit CasADi matrices of every block of the symbol ``vector``."""
        return {b.name: b.scale * ca.reshape(vector[b.offset:b.stop], b.rows, b.cols)
                for b in self._blocks.values()}

    # -- numeric ---------------------------------------------------------
    def zeros(self) -> np.ndarray:
        return np.zeros(self.size)

    def get(self, vector, name: str) -> np.ndarray:
        """Physical value of block ``name`` from a scaled numeric vector, shape (rows, cols)."""
        b = self._blocks[name]
        return b.scale * np.asarray(vector, dtype=float)[b.offset:b.stop].reshape((b.rows, b.cols), order="F")

    def set(self, vector: np.ndarray, name: str, value) -> None:
        """Write the physical ``value`` (broadcast to the block's shape) into ``vector`` in place."""
        b = self._blocks[name]
        value = np.asarray(value, dtype=float)
        if value.ndim == 1 and value.size == b.size:
            value = value.reshape((b.rows, b.cols), order="F")
        value = np.broadcast_to(value, (b.rows, b.cols))
        vector[b.offset:b.stop] = value.reshape(-1, order="F") / b.scale

    def pack(self, values: dict) -> np.ndarray:
        """A scaled vector holding the physical ``values`` of the named blocks (others zero).

        Names that are not blocks of this layout are ignored, so one dict of
        arrays can fill the layouts of several objectives.
        """
        vector = self.zeros()
        for name, value in values.items():
            if name in self._blocks:
                self.set(vector, name, value)
        return vector

    def unpack(self, vector) -> dict[str, np.ndarray]:
        """Every block's physical value from a scaled numeric vector."""
        return {name: self.get(vector, name) for name in self._blocks}

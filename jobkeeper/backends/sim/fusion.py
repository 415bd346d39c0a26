"""Gate fusion: merge runs of gates on few qubits into small dense blocks.

Every gate applied on its own is a pass over the whole state. A pass with a 5-qubit
matrix costs two to four passes with a 1-qubit one (measured with
benchmarks/bench_statevector.py) but can stand for a dozen gates, so neighbouring gates
are multiplied together first. The fuser keeps open blocks on disjoint qubits; a gate
joins the blocks it touches when their union stays within ``max_width`` qubits, and
otherwise the widest of those blocks are emitted first until it fits. Open blocks on
disjoint qubits commute, so emitting some of them early keeps the circuit's meaning.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import TypeVar

import numpy as np

from jobkeeper.backends.sim.gates import Matrix, embed, kron
from jobkeeper.backends.sim.kernels import classify

#: widest fused block: on a random layered 24-qubit circuit 5 beat 4 and 3 (fewer passes
#: outweigh the dearer 32 × 32 products).
DEFAULT_MAX_WIDTH = 5

_I2 = np.eye(2, dtype=np.complex128)


@dataclass(frozen=True, slots=True)
class Block:
    """A unitary on ``qubits`` (first listed most significant) and the kernel for it."""

    qubits: tuple[int, ...]
    matrix: Matrix
    kind: str


T = TypeVar("T")


def distinct(blocks: Iterable[T]) -> list[T]:
    """Each block once, in first-seen order: a block still open is listed under every
    qubit it touches."""
    return list({id(blk): blk for blk in blocks}.values())


def _block(qubits: tuple[int, ...], matrix: Matrix) -> Block:
    return Block(qubits, matrix, classify(matrix))


@dataclass(slots=True)
class _Open:
    qubits: list[int]
    matrix: Matrix


def _merge(blocks: list[_Open]) -> _Open:
    qubits: list[int] = []
    matrix: Matrix = np.ones((1, 1), dtype=np.complex128)
    for blk in blocks:
        qubits += blk.qubits
        matrix = kron(matrix, blk.matrix)
    return _Open(qubits, matrix)


def fuse(
    gates: list[tuple[tuple[int, ...], Matrix]], max_width: int = DEFAULT_MAX_WIDTH
) -> list[Block]:
    """Blocks whose product, applied in order, equals the gates applied in order."""
    every = sorted({q for qubits, _ in gates for q in qubits}, reverse=True)
    if len(every) <= max_width:
        return [_one_block(gates, tuple(every))]
    out: list[Block] = []
    open_on: dict[int, _Open] = {}

    def emit(blk: _Open) -> None:
        for q in blk.qubits:
            del open_on[q]
        out.append(_block(tuple(blk.qubits), blk.matrix))

    for qubits, matrix in gates:
        touched: list[_Open] = []
        for q in qubits:
            blk = open_on.get(q)
            if blk is not None and all(blk is not t for t in touched):
                touched.append(blk)
        # Emit the widest touched blocks until the rest and the gate fit in one block
        # (the gate then follows what was emitted, as it must).
        touched.sort(key=lambda b: len(b.qubits), reverse=True)
        while len(set(qubits).union(*(b.qubits for b in touched))) > max(max_width, len(qubits)):
            emit(touched.pop(0))
        merged = _merge(touched)
        for q in qubits:
            if q not in merged.qubits:
                merged.qubits.append(q)
                merged.matrix = kron(merged.matrix, _I2)
        for blk in touched:
            for q in blk.qubits:
                del open_on[q]
        positions = tuple(merged.qubits.index(q) for q in qubits)
        merged.matrix = embed(matrix, positions, len(merged.qubits)) @ merged.matrix
        for q in merged.qubits:
            open_on[q] = merged
    out.extend(_block(tuple(blk.qubits), blk.matrix) for blk in distinct(open_on.values()))
    return out


def _one_block(gates: list[tuple[tuple[int, ...], Matrix]], qubits: tuple[int, ...]) -> Block:
    """All ``gates`` as one block on ``qubits`` (highest first, as the kernels order them):
    what the general fuser ends with when everything fits one block, without its merging
    bookkeeping (which cost more than simulating a small circuit)."""
    place = {q: i for i, q in enumerate(qubits)}
    matrix: Matrix | None = None
    for gate_qubits, gate in gates:
        full = embed(gate, tuple(place[q] for q in gate_qubits), len(qubits))
        matrix = full if matrix is None else full @ matrix
    assert matrix is not None
    return _block(qubits, matrix)

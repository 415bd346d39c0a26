"""In-place gate kernels on a state vector.

Layout: a flat complex128 array of 2^n amplitudes; qubit ``q`` is bit ``q`` of the index
(qubit 0 is the least significant). A gate on qubits ``t_1 > t_2 > ... > t_k`` sees the
state as the view ``(2^(n-1-t_1), 2, 2^(t_1-t_2-1), 2, ..., 2, 2^(t_k))``: free axes at
even positions, target axes (size 2) at odd ones. No 2^n × 2^n matrix is ever built and
no Python loop runs over amplitudes; Python loops run over cache-sized chunks only.

A pass over the state is bound by memory bandwidth, so a gate must be few numpy
operations per cache-sized chunk, and OpenBLAS's real products are the cheapest. A dense
gate takes one of five routes: on the lowest qubits, rows of the state times the gate
widened to them, as a real product of interleaved (re, im) floats; a high and a low
qubit, four such products on the two halves of the high qubit; a high single qubit,
phases around a real rotation; consecutive higher qubits, complex products on blocks in
place; otherwise each chunk is gathered with the target axes first, multiplied and
scattered back. Diagonal gates multiply slices in place and permutation gates move
slices. The measurements behind each route and constant are in benchmarks/README.md
(re-measure with benchmarks/bench_statevector.py before changing one).
"""

from __future__ import annotations

import itertools
import threading
from collections.abc import Iterator

import numpy as np
import numpy.typing as npt

from jobkeeper.backends.sim.gates import Matrix, embed

State = npt.NDArray[np.complex128]

#: amplitudes per chunk (2^14 × 16 bytes = 256 KiB: chunk, copy and product stay in the
#: L2 cache).
CHUNK = 1 << 14
#: amplitudes per chunk on the low route, by width in qubits: OpenBLAS's real product
#: slows down past a size that falls as rows widen.
LOW_CHUNK = {2: 1 << 14, 3: 1 << 14, 4: 1 << 13, 5: 1 << 12, 6: 1 << 12}
#: dense gates whose targets all lie below this qubit act on the low qubits as rows (no
#: gather), and below LOW_QUBITS_DENSE when widening adds at most two qubits.
LOW_QUBITS = 4
LOW_QUBITS_DENSE = 6
#: a two-qubit gate on one high qubit and one below this takes the split route.
SPLIT_LOW = 3
#: consecutive targets t..t+k-1 with t + k at least this skip the gather: products on
#: (2^k × 2^t) blocks in place (below it, gathering wins).
DIRECT_BLOCK = 9

_local = threading.local()


def _scratch(slot: int, size: int) -> State:
    """A per-thread buffer of ``size`` amplitudes kept across calls (a fresh one costs
    page faults on first touch; local backends may run in threads)."""
    buffers: dict[int, State] | None = getattr(_local, "buffers", None)
    if buffers is None:
        buffers = _local.buffers = {}
    buf = buffers.get(slot)
    if buf is None or buf.size < size:
        buf = buffers[slot] = np.empty(size, dtype=np.complex128)
    return buf[:size]


def _view_shape(n: int, desc: tuple[int, ...]) -> tuple[int, ...]:
    shape: list[int] = []
    upper = n
    for q in desc:
        shape += [1 << (upper - 1 - q), 2]
        upper = q
    shape.append(1 << upper)
    return tuple(shape)


def reorder(matrix: Matrix, qubits: tuple[int, ...]) -> tuple[Matrix, tuple[int, ...]]:
    """``matrix`` (first listed qubit most significant) re-indexed so that the highest
    qubit is most significant, with the qubits in descending order."""
    k = len(qubits)
    order = sorted(range(k), key=lambda i: -qubits[i])
    desc = tuple(qubits[i] for i in order)
    if list(order) == list(range(k)):
        return matrix, desc
    tensor = matrix.reshape((2,) * (2 * k)).transpose(order + [k + i for i in order])
    return np.ascontiguousarray(tensor.reshape(1 << k, 1 << k)), desc


def _chunks(shape: tuple[int, ...]) -> Iterator[tuple[slice, ...]]:
    """Index tuples cutting a target view into chunks of at most CHUNK amplitudes (at
    least the 2^k target amplitudes); each keeps every axis."""
    targets = 1 << (len(shape) // 2)
    inner = targets
    split = -1
    for pos in range(len(shape) - 1, -1, -2):
        if inner * shape[pos] <= max(CHUNK, targets):
            inner *= shape[pos]
        else:
            split = pos
            break
    if split < 0:
        yield tuple(slice(None) for _ in shape)
        return
    piece = max(1, CHUNK // inner)
    outer = [range(shape[p]) for p in range(0, split, 2)]
    for fixed in itertools.product(*outer, range(0, shape[split], piece)):
        index: list[slice] = []
        for pos in range(len(shape)):
            if pos % 2 or pos > split:
                index.append(slice(None))
            else:
                start = fixed[pos // 2]
                index.append(slice(start, start + (piece if pos == split else 1)))
        yield tuple(index)


def apply_dense(state: State, n: int, matrix: Matrix, qubits: tuple[int, ...]) -> None:
    """Apply a dense 2^k × 2^k ``matrix`` to ``qubits`` (first listed most significant)."""
    matrix, desc = reorder(matrix, qubits)
    k = len(desc)
    if desc[0] < LOW_QUBITS or (desc[0] < LOW_QUBITS_DENSE and desc[0] + 1 - k <= 2):
        _apply_low(state, n, matrix, desc)
        return
    if k == 2 and desc[1] < SPLIT_LOW:
        _apply_split(state, matrix, desc)
        return
    if k == 1 and (1 << desc[0]) >= CHUNK // 2:
        factors = _phases_rotation_phases(matrix)
        if factors is not None:
            _apply_rotation(state.reshape(-1, 2, 1 << desc[0]), *factors)
            return
    if desc[0] - desc[-1] == k - 1 and (desc[-1] + k >= DIRECT_BLOCK or 1 << n <= CHUNK):
        # Consecutive targets with enough amplitudes below them, or a state of one chunk
        # (one product beats a gather's copies): (D × D) times (D × 2^t) blocks straight
        # from the state, no gather.
        _apply_consecutive(state.reshape(-1, 1 << k, 1 << desc[-1]), matrix)
        return
    _apply_gathered(state, n, matrix, desc)


def _apply_gathered(state: State, n: int, matrix: Matrix, desc: tuple[int, ...]) -> None:
    k = len(desc)
    shape = _view_shape(n, desc)
    size = max(CHUNK, 1 << k)
    buf_in, buf_out = _scratch(0, size), _scratch(1, size)
    if desc[-1] >= 3 and shape[-1] << k <= CHUNK:
        # The runs below the lowest target as single opaque items: one transposed copy
        # of them per chunk runs faster than numpy's copy of short complex runs and than
        # one copy per target pattern.
        item = np.dtype((np.void, 16 * shape[-1]))
        items = state.view(item).reshape(shape[:-1])
        first = [*range(1, 2 * k, 2), *range(0, 2 * k, 2)]
        items_in, items_out = buf_in.view(item), buf_out.view(item)
        for index in _chunks(shape):
            runs = items[index[:-1]].transpose(first)
            count = runs.size
            np.copyto(items_in[:count].reshape(runs.shape), runs)
            amps = count * shape[-1]
            np.matmul(
                matrix, buf_in[:amps].reshape(1 << k, -1), out=buf_out[:amps].reshape(1 << k, -1)
            )
            np.copyto(runs, items_out[:count].reshape(runs.shape))
        return
    # Few amplitudes below the lowest target: one copy per target pattern, as a single
    # transposed copy would run its inner loop over a target axis of length 2.
    view = state.reshape(shape)
    first = [*range(1, 2 * k, 2), *range(0, 2 * k + 1, 2)]
    patterns = [tuple((p >> (k - 1 - j)) & 1 for j in range(k)) for p in range(1 << k)]
    for index in _chunks(shape):
        chunk = view[index].transpose(first)
        gathered = buf_in[: chunk.size].reshape(chunk.shape)
        result = buf_out[: chunk.size].reshape(chunk.shape)
        for pattern in patterns:
            np.copyto(gathered[pattern], chunk[pattern])
        np.matmul(matrix, gathered.reshape(1 << k, -1), out=result.reshape(1 << k, -1))
        for pattern in patterns:
            np.copyto(chunk[pattern], result[pattern])


def _real_right(matrix: Matrix) -> npt.NDArray[np.float64]:
    """The real 2D × 2D matrix R with real(x) @ R = real(x @ matrix.T) for complex rows x
    seen as interleaved (re, im) floats (cheaper than a complex product on gathered
    rows)."""
    right = matrix.T
    dim = right.shape[0]
    out = np.empty((2 * dim, 2 * dim))
    out[0::2, 0::2] = right.real
    out[1::2, 0::2] = -right.imag
    out[0::2, 1::2] = right.imag
    out[1::2, 1::2] = right.real
    return out


def _low_right(matrix: Matrix, desc: tuple[int, ...], width: int) -> npt.NDArray[np.float64]:
    return _real_right(embed(matrix, tuple(width - 1 - q for q in desc), width))


def _apply_low(state: State, n: int, matrix: Matrix, desc: tuple[int, ...]) -> None:
    # Rows of 2^w amplitudes times the gate widened to the w lowest qubits; at least two
    # qubits wide, as rows of 8 floats run faster than rows of 4.
    width = min(max(desc[0] + 1, 2), n)
    right = _low_right(matrix, desc, width)
    rows = state.view(np.float64).reshape(-1, 2 << width)
    step = min(max(1, LOW_CHUNK.get(width, CHUNK) >> width), rows.shape[0])
    held = _scratch(0, step << width).view(np.float64).reshape(step, -1)
    for start in range(0, rows.shape[0], step):
        part = rows[start : start + step]
        # Copy first, then the product writes the state: the copy streams from memory
        # faster than the product reads it.
        buf = held[: part.shape[0]]
        np.copyto(buf, part)
        np.matmul(buf, right, out=part)


def _apply_split(state: State, matrix: Matrix, desc: tuple[int, ...]) -> None:
    # A high qubit h and a low qubit l: the halves h = 0 and h = 1 of a chunk are rows of
    # the low route, and out_i = sum_j rows_j @ R_ij with R_ij the gate's 2 × 2 block
    # (i, j) acting on l, widened.
    high, low = desc
    width = max(low + 1, 2)
    rights = [
        [_low_right(matrix[2 * i : 2 * i + 2, 2 * j : 2 * j + 2], (low,), width) for j in (0, 1)]
        for i in (0, 1)
    ]
    view = state.reshape(-1, 2, 1 << high)
    span = min(1 << high, CHUNK // 2)
    per = max(1, (CHUNK // 2) >> high)
    bufs = [_scratch(slot, per * span) for slot in range(5)]

    # Products write the state, one per run, when a chunk holds at most four runs of each
    # half; with more runs the calls cost more than copying through buffers.
    direct = per <= 4

    def rows(x: State, count: int) -> npt.NDArray[np.float64]:
        return x.view(np.float64).reshape(count, -1, 2 << width)

    for a in range(0, view.shape[0], per):
        for b in range(0, 1 << high, span):
            part = view[a : a + per, :, b : b + span]
            count = part.shape[0]
            size = count * span
            held = [bufs[j][:size].reshape(count, span) for j in (0, 1)]
            for j in (0, 1):
                np.copyto(held[j], part[:, j])
            outs = [part[:, i] if direct else bufs[2 + i][:size] for i in (0, 1)]
            tmp = rows(bufs[4][:size], count)
            for i in (0, 1):
                out = rows(outs[i], count)
                np.matmul(rows(held[0], count), rights[i][0], out=out)
                np.matmul(rows(held[1], count), rights[i][1], out=tmp)
                np.add(out, tmp, out=out)
            if not direct:
                for i in (0, 1):
                    np.copyto(part[:, i], outs[i].reshape(count, span))


def _phases_rotation_phases(
    matrix: Matrix,
) -> tuple[complex, complex, complex, npt.NDArray[np.float64]] | None:
    """(p0, p1, q, R) with ``matrix`` = diag(p0, p1) @ R @ diag(1, q) and R real, which
    every 2 × 2 unitary with no zero entry has; None for other matrices."""
    if np.count_nonzero(np.abs(matrix) < 1e-12):
        return None
    p0, p1 = (complex(v / abs(v)) for v in matrix[:, 0])
    q = complex(matrix[0, 1] / p0)
    q /= abs(q)
    real = matrix * np.array([[1 / p0], [1 / p1]]) * np.array([1, 1 / q])
    if np.abs(real.imag).max() > 1e-13 * np.abs(matrix).max():
        return None
    return p0, p1, q, np.ascontiguousarray(real.real)


def _apply_rotation(
    view: State, p0: complex, p1: complex, q: complex, rotation: npt.NDArray[np.float64]
) -> None:
    # One qubit with at least half a chunk below it, as phases around a real rotation:
    # OpenBLAS's real (2 × 2) @ (2 × m) product is much cheaper than the complex one, and
    # the three half-chunk phase products cost less than the difference. Lower qubits
    # gain nothing: phase products on strided halves run slower than on contiguous ones.
    span = CHUNK // 2
    held = _scratch(0, 2 * span).view(np.float64).reshape(2, -1)
    for row in view:
        for b in range(0, row.shape[1], span):
            part = row[:, b : b + span]
            np.multiply(part[1], q, out=part[1])
            np.matmul(rotation, part.view(np.float64), out=held)
            rotated = held.view(np.complex128)
            np.multiply(rotated[0], p0, out=part[0])
            np.multiply(rotated[1], p1, out=part[1])


def _apply_consecutive(view: State, matrix: Matrix) -> None:
    top, dim, low = view.shape
    per = max(1, CHUNK // (dim * low))
    width = min(low, max(1, CHUNK // dim))
    buf = np.empty((min(per, top), dim, width), dtype=np.complex128)
    for a in range(0, top, per):
        for b in range(0, low, width):
            part = view[a : a + per, :, b : b + width]
            out = buf[: part.shape[0]]
            np.matmul(matrix, part, out=out)
            part[...] = out


def apply_diagonal(
    state: State, n: int, diag: npt.NDArray[np.complex128], qubits: tuple[int, ...]
) -> None:
    """Multiply by a diagonal gate given by its diagonal (first listed qubit most
    significant): one in-place multiply per basis pattern whose entry is not 1."""
    matrix, desc = reorder(np.diag(diag), qubits)
    view = state.reshape(_view_shape(n, desc))
    k = len(desc)
    for pattern, value in enumerate(np.diagonal(matrix)):
        if value == 1:
            continue
        index: list[int | slice] = [slice(None)] * (2 * k + 1)
        for j in range(k):
            index[2 * j + 1] = (pattern >> (k - 1 - j)) & 1
        part = view[tuple(index)]
        part *= value


def apply_monomial(state: State, n: int, matrix: Matrix, qubits: tuple[int, ...]) -> None:
    """Apply a gate with exactly one non-zero entry per column (x, cx, swap, ccx, ...):
    slices move along the permutation's cycles, times their phases."""
    matrix, desc = reorder(matrix, qubits)
    k = len(desc)
    view = state.reshape(_view_shape(n, desc))
    dest = np.argmax(np.abs(matrix), axis=0)
    phase = matrix[dest, np.arange(1 << k)]

    def part(pattern: int) -> State:
        index: list[int | slice] = [slice(None)] * (2 * k + 1)
        for j in range(k):
            index[2 * j + 1] = (pattern >> (k - 1 - j)) & 1
        return view[tuple(index)]

    seen = [False] * (1 << k)
    for start in range(1 << k):
        if seen[start]:
            continue
        cycle = [start]
        seen[start] = True
        while dest[cycle[-1]] != start:
            cycle.append(int(dest[cycle[-1]]))
            seen[cycle[-1]] = True
        if len(cycle) == 1:
            if phase[start] != 1:
                fixed = part(start)
                fixed *= phase[start]
            continue
        # Content of cycle[i] moves to cycle[i+1] (times its column's phase).
        saved = part(cycle[-1]).copy()
        for i in range(len(cycle) - 1, 0, -1):
            np.multiply(part(cycle[i - 1]), phase[cycle[i - 1]], out=part(cycle[i]))
        np.multiply(saved, phase[cycle[-1]], out=part(cycle[0]))


def classify(matrix: Matrix) -> str:
    """``identity``, ``diagonal``, ``monomial`` or ``dense``: which kernel applies."""
    nonzero = np.abs(matrix) > 1e-14
    if np.count_nonzero(nonzero) > matrix.shape[0]:
        # Some row holds two entries: neither diagonal nor monomial. Most fused blocks end
        # here, so this is decided first (the full checks cost a fifth of a small job).
        return "dense"
    off = nonzero & ~np.eye(matrix.shape[0], dtype=bool)
    if not off.any():
        return "identity" if np.allclose(np.diagonal(matrix), 1, rtol=0, atol=1e-14) else "diagonal"
    if (nonzero.sum(axis=0) == 1).all() and (nonzero.sum(axis=1) == 1).all():
        return "monomial"
    return "dense"


def apply(state: State, n: int, matrix: Matrix, qubits: tuple[int, ...], kind: str) -> None:
    """Apply ``matrix`` with the kernel ``classify`` chose for it."""
    if kind == "dense":
        apply_dense(state, n, matrix, qubits)
    elif kind == "diagonal":
        apply_diagonal(state, n, np.diagonal(matrix).copy(), qubits)
    elif kind == "monomial":
        apply_monomial(state, n, matrix, qubits)


def probability_of_one(state: State, n: int, qubit: int) -> float:
    """P(qubit reads 1), summed without copying the state."""
    floats = state.view(np.float64).reshape(1 << (n - 1 - qubit), 2, 2 << qubit)[:, 1, :]
    return float(np.einsum("ij,ij->", floats, floats))


def qubit_slices(state: State, n: int, qubit: int) -> tuple[State, State]:
    """The amplitudes with ``qubit`` = 0 and = 1, as views."""
    view = state.reshape(1 << (n - 1 - qubit), 2, 1 << qubit)
    return view[:, 0, :], view[:, 1, :]

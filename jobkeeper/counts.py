"""Big count tables as arrays: a compact, read-only mapping of bit string → shots.

A run over many qubits with many shots sees up to one distinct outcome per shot: 10^6
shots over 20 qubits give about half a million. As a dict of Python strings such a table
costs some 150 bytes an entry and takes longer to build than the sampling that produced
it; written as canonical JSON for the archive (three times: the counts document, the
signed statement that embeds it, the stored copy) it took seconds. A
:class:`CountTable` keeps the keys as one row of ASCII bytes each and the counts as an
integer array. It is a ``Mapping[str, int]`` like any counts (the strings are made the
first time someone asks for them), and writes its RFC 8785 canonical JSON with numpy,
without making them.

The simulators hand over a CountTable when a run has many distinct outcomes and a plain
dict otherwise; everything that reads counts takes either.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol, TypeVar

import numpy as np
import numpy.typing as npt

Rows = npt.NDArray[np.uint8]
Ints = npt.NDArray[np.int64]
_V = TypeVar("_V")

#: the characters of a count key: bits, and the separator between registers (of either
#: convention, see RegisterLayout).
_ALPHABET = np.zeros(256, dtype=bool)
_ALPHABET[[ord("|"), ord(" "), ord("0"), ord("1")]] = True
#: RFC 8785 leaves integers beyond this to strings; no count comes near it.
MAX_COUNT = 2**53 - 1


class CountTable(Mapping[str, int]):
    """Counts of equal-length bit strings, kept as arrays.

    ``rows`` holds one ASCII count key per row (``'0'``, ``'1'``, separators), ``values``
    the count of each. A string may appear in several rows (outcomes of different
    classical records that print the same): their counts add up.
    """

    __slots__ = ("_dict", "_json", "_merged", "_parts")

    def __init__(self, rows: Rows, values: Ints) -> None:
        rows = np.ascontiguousarray(rows, dtype=np.uint8)
        values = np.ascontiguousarray(values, dtype=np.int64)
        if rows.ndim != 2 or values.shape != (rows.shape[0],):
            raise ValueError("a count table needs one row of characters per count")
        if not _ALPHABET[rows].all():
            raise ValueError("count keys hold only '0', '1' and separators")
        if len(values) and not (values.min() > 0 and values.max() <= MAX_COUNT):
            raise ValueError(f"counts must be whole numbers from 1 to {MAX_COUNT}")
        self._parts: list[tuple[Rows, Ints]] = [(rows, values)]
        self._merged: tuple[Rows, Ints] | None = None
        self._dict: dict[str, int] | None = None
        self._json: bytes | None = None

    @classmethod
    def from_parts(cls, parts: Sequence[tuple[Rows, Ints]]) -> CountTable:
        """A table from several (rows, counts) parts, unchecked: for parts a simulator
        built itself (its tests check them; checking here would cost as much as building
        them). Rows of equal strings in different parts add up."""
        table = cls.__new__(cls)
        table._parts = list(parts)
        table._merged = None
        table._dict = None
        table._json = None
        return table

    # -- the arrays ---------------------------------------------------------------------

    def arrays(self) -> tuple[Rows, Ints]:
        """The distinct rows in canonical order (ascending by character code, as RFC 8785
        sorts keys) and their counts."""
        if self._merged is None:
            self._merged = _merge(self._parts)
        return self._merged

    @property
    def shots(self) -> int:
        return int(sum(int(values.sum()) for _, values in self._parts))

    # -- Mapping ------------------------------------------------------------------------

    def to_dict(self) -> dict[str, int]:
        """A plain dict (made once, then kept)."""
        if self._dict is None:
            rows, values = self.arrays()
            self._dict = dict(zip(strings_of_rows(rows), values.tolist(), strict=True))
        return self._dict

    def __getitem__(self, key: str) -> int:
        return self.to_dict()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self.to_dict())

    def __len__(self) -> int:
        return len(self.arrays()[1])

    def __contains__(self, key: object) -> bool:
        return key in self.to_dict()

    def __repr__(self) -> str:
        return f"CountTable({len(self)} outcomes, {self.shots} shots)"

    def __reduce__(self) -> tuple[Any, ...]:
        rows, values = self.arrays()
        return (CountTable, (rows, values))

    # -- canonical JSON -----------------------------------------------------------------

    def canonical_json(self) -> bytes:
        """RFC 8785 canonical JSON of the table: ``{"key":count,...}`` with the keys in
        ascending order of their UTF-16 code units (for these ASCII keys, of their bytes)
        and nothing between the tokens. Equal to the reference implementation's bytes for
        ``to_dict()`` (a property test checks that)."""
        if self._json is None:
            self._json = _canonical_json(*self.arrays())
        return self._json


class Register(Protocol):
    """What a count key needs of a classical register (``jobkeeper.circuit.ir.Register``
    has it): its name, size and the absolute index of its bit 0."""

    @property
    def name(self) -> str: ...

    @property
    def size(self) -> int: ...

    @property
    def offset(self) -> int: ...


#: written between two registers in a count key.
KEY_SEPARATOR = "|"
#: what archives signed under the first run predicate wrote between registers (their
#: keys put the last declared register first; see :class:`RegisterLayout`).
FIRST_SEPARATOR = " "


def key_columns(cregs: Sequence[Register]) -> list[int]:
    """The layout of a count key: for each character, left to right, the classical bit
    shown there (its absolute index), or -1 for the separator between registers.

    The one statement of how count keys are written (the simulators' formatter, the REST
    adapter's decoders and the loopback device all build on it): registers in declaration
    order, the first declared leftmost, KEY_SEPARATOR between them; within a register its
    value in binary, the highest index leftmost. A single register is its binary value.
    """
    columns: list[int] = []
    for reg in cregs:
        if columns:
            columns.append(-1)
        columns += [reg.offset + i for i in reversed(range(reg.size))]
    return columns


def count_key(bits: Sequence[int], cregs: Sequence[Register]) -> str:
    """The count key of one shot from its classical values: ``bits[c]`` is the value
    (0 or 1) of classical bit ``c``."""
    return "".join(KEY_SEPARATOR if c < 0 else "01"[bits[c]] for c in key_columns(cregs))


def clbit_values(key: str, cregs: Sequence[Register]) -> list[int]:
    """The inverse of :func:`count_key`: ``values[c]`` is classical bit c of the key.
    ValueError for a key that is not laid out for these registers."""
    columns = key_columns(cregs)
    if len(key) != len(columns):
        raise ValueError(f"count key {key!r} has {len(key)} characters, not {len(columns)}")
    values = [0] * sum(reg.size for reg in cregs)
    for char, clbit in zip(key, columns, strict=True):
        if (clbit < 0) != (char == KEY_SEPARATOR) or char not in "01" + KEY_SEPARATOR:
            raise ValueError(f"count key {key!r} does not fit its registers")
        if clbit >= 0:
            values[clbit] = int(char)
    return values


def plain_key(key: str) -> str:
    """A count key as one binary number of all the classical bits, c[0] rightmost (as
    devices often write outcomes): the registers in reverse declaration order, as a
    parsed circuit lays its registers out one after the other."""
    return "".join(reversed(key.split(KEY_SEPARATOR)))


@dataclass(frozen=True, slots=True)
class RegisterLayout:
    """How the count keys of one result are laid out: its classical registers' names and
    widths in declaration order, and which convention wrote the keys.

    ``first`` is True for results signed under the first run predicate, whose keys wrote
    the last declared register leftmost with a space between registers (``"1 01"`` for
    ``creg a[2]; creg b[1];`` with a=01, b=1); they keep that meaning. Every other result
    is keyed as :func:`key_columns` says (``"01|1"``).
    """

    registers: tuple[tuple[str, int], ...]
    first: bool = False

    @classmethod
    def of(cls, cregs: Sequence[Register], names: Sequence[str] = ()) -> RegisterLayout:
        """The layout of a circuit's registers; ``names``, when given, are the names the
        user declared (a canonical circuit's registers are called ``c0``, ``c1``, …)."""
        if names and len(names) != len(cregs):
            raise ValueError(f"{len(names)} register names for {len(cregs)} registers")
        chosen = list(names) or [reg.name for reg in cregs]
        return cls(tuple((name, reg.size) for name, reg in zip(chosen, cregs, strict=True)))

    @classmethod
    def from_json(cls, data: Any, *, first: bool = False) -> RegisterLayout:
        """The layout a run predicate records (``[{"name": ..., "width": ...}, ...]``);
        ValueError for anything else."""
        if not isinstance(data, list):
            raise ValueError("a register layout is a list of registers")
        registers = []
        for item in data:
            if not isinstance(item, dict) or set(item) != {"name", "width"}:
                raise ValueError("each register of a layout has a name and a width")
            name, width = item["name"], item["width"]
            if not isinstance(name, str) or not name or isinstance(width, bool):
                raise ValueError("a register's name is a non-empty string")
            if not isinstance(width, int) or width < 1:
                raise ValueError(f"register {name!r} has width {width!r}, not a positive integer")
            registers.append((name, width))
        if len({name for name, _ in registers}) != len(registers):
            raise ValueError("two registers of a layout have one name")
        return cls(tuple(registers), first=first)

    def to_json(self) -> list[dict[str, Any]]:
        """As a run predicate records it: declaration order, first declared first."""
        return [{"name": name, "width": width} for name, width in self.registers]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(name for name, _ in self.registers)

    @property
    def separator(self) -> str:
        return FIRST_SEPARATOR if self.first else KEY_SEPARATOR

    def describe(self) -> dict[str, Any]:
        """The layout as readers print it beside counts (snake_case JSON): the registers
        in declaration order, the character between them, and where the first declared
        register stands in a key."""
        return {
            "registers": self.to_json(),
            "separator": self.separator,
            "first_declared": "rightmost" if self.first else "leftmost",
        }

    def split(self, key: str) -> tuple[str, ...]:
        """A count key's register values as bit strings, in declaration order.
        ValueError for a key that does not fit the layout."""
        if not self.registers:
            if key:
                raise ValueError(f"count key {key!r} does not fit a circuit with no register")
            return ()
        parts = key.split(self.separator) if len(self.registers) > 1 else [key]
        if self.first:
            parts.reverse()
        if [len(p) for p in parts] != [w for _, w in self.registers] or any(
            p.strip("01") for p in parts
        ):
            raise ValueError(f"count key {key!r} does not fit registers {self.registers}")
        return tuple(parts)

    def current_key(self, key: str) -> str:
        """The key as :func:`key_columns` writes it (a first-predicate key rewritten)."""
        if not self.first or len(self.registers) <= 1:
            return key
        return KEY_SEPARATOR.join(self.split(key))

    def current_counts(self, counts: Mapping[str, _V]) -> dict[str, _V]:
        """Counts (or probabilities) keyed as :func:`key_columns` writes keys: what
        comparisons across results of either convention read."""
        if not self.first or len(self.registers) <= 1:
            return dict(counts)
        return {self.current_key(key): value for key, value in counts.items()}

    def columns(self, taken: Sequence[str] = ()) -> list[str]:
        """One CSV column per register, ``reg_<name>``: the prefix keeps them apart from
        ``outcome``, ``count`` and ``probability``; a name among ``taken`` (a program's
        input names) gets the prefix again until it is not (``reg_reg_<name>``)."""
        columns = []
        for name in self.names:
            column = f"reg_{name}"
            while column in taken:
                column = f"reg_{column}"
            columns.append(column)
        return columns


def strings_of_rows(rows: Rows) -> list[str]:
    """One str per row: one decode and one split (per-row Python work would cost more)."""
    count, width = rows.shape
    if count == 0:
        return []
    lines = np.empty((count, width + 1), dtype=np.uint8)
    lines[:, :width] = rows
    lines[:, width] = 10
    strings = lines.tobytes().decode("ascii").split("\n")
    strings.pop()
    return strings


def _merge(parts: Sequence[tuple[Rows, Ints]]) -> tuple[Rows, Ints]:
    """Rows sorted by their bytes, duplicates merged (counts added)."""
    parts = [(rows, values) for rows, values in parts if len(values)]
    widths = {rows.shape[1] for rows, _ in parts}
    if len(widths) > 1:
        raise ValueError("the bit strings of one count table have one length")
    if not parts:
        return np.empty((0, 0), np.uint8), np.empty(0, np.int64)
    width = widths.pop()
    rows = np.concatenate([r for r, _ in parts])
    values = np.concatenate([v for _, v in parts])
    if len(values) == 1:
        return rows, values
    # Rows as big-endian 64-bit words (zero-padded): sorting the words column by column,
    # first column first, sorts the rows by their bytes.
    words_per_row = -(-width // 8)
    padded = np.zeros((len(rows), 8 * words_per_row), dtype=np.uint8)
    padded[:, :width] = rows
    words = padded.view(">u8").astype(np.uint64)
    if _strictly_ascending(words):
        # The usual case (one record, outcomes in index order): sorted and distinct.
        return rows, values
    order = np.lexsort(words.T[::-1])
    words, rows, values = words[order], rows[order], values[order]
    starts = np.concatenate(([True], (words[1:] != words[:-1]).any(axis=1)))
    if starts.all():
        return rows, values
    first = np.flatnonzero(starts)
    return rows[first], np.add.reduceat(values, first)


def _strictly_ascending(words: npt.NDArray[np.uint64]) -> bool:
    """Whether each row of ``words`` is greater than the one before, column by column."""
    later, earlier = words[1:], words[:-1]
    differs = later != earlier
    first = differs.argmax(axis=1)  # the first column where they differ (0 if none)
    at = np.arange(len(first))
    return bool((differs[at, first] & (later[at, first] > earlier[at, first])).all())


def _canonical_json(rows: Rows, values: Ints) -> bytes:
    count, width = rows.shape
    if count == 0:
        return b"{}"
    if int(values.max()) > MAX_COUNT:
        raise ValueError(f"a count above {MAX_COUNT} has no exact form in canonical JSON")
    digits = len(str(int(values.max())))
    # One fixed-width line per entry: "key":digits, — then the leading zeros of each
    # count are masked out and the lines joined by taking every unmasked byte.
    line = np.empty((count, width + 4 + digits), dtype=np.uint8)
    line[:, 0] = ord('"')
    line[:, 1 : width + 1] = rows
    line[:, width + 1] = ord('"')
    line[:, width + 2] = ord(":")
    keep = np.ones(line.shape, dtype=bool)
    for d in range(digits):
        power = 10 ** (digits - 1 - d)
        line[:, width + 3 + d] = 48 + (values // power) % 10
        if d < digits - 1:
            keep[:, width + 3 + d] = values >= power
    line[:, -1] = ord(",")
    body = line[keep].tobytes()
    return b"{" + body[:-1] + b"}"

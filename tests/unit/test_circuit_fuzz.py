"""No input makes the parser crash, hang or take more than linear time (DESIGN §4): every
input gives a Circuit or a CircuitError, nothing else."""

from __future__ import annotations

import contextlib
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from jobkeeper.circuit import canonical_text, load_qasm, metrics, parse_qasm
from jobkeeper.exceptions import CircuitError
from tests.conftest import SHARED

SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=list(HealthCheck))
HEADER = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'

_CORPUS = SHARED / "corpus" / "qasm"
CORPUS_BYTES = [p.read_bytes() for p in sorted(_CORPUS.rglob("*.qasm"))] if _CORPUS.exists() else []


def parse_only_safely(text: str) -> None:
    try:
        circuit = parse_qasm(text, filename="fuzz.qasm")
    except CircuitError as exc:
        assert exc.line is None or exc.line >= 1
        assert exc.column is None or exc.column >= 1
        str(exc)
        return
    # Whatever parses must also canonicalise, re-parse and measure without surprises.
    again = parse_qasm(canonical_text(circuit))
    assert again.operations == circuit.operations
    metrics(circuit)


def load_bytes_safely(data: bytes) -> None:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        with tempfile.TemporaryDirectory() as folder:
            path = Path(folder) / "fuzz.qasm"
            path.write_bytes(data)
            try:
                load_qasm(path)
            except CircuitError:
                return
        return
    parse_only_safely(text)


TOKENS = [
    "OPENQASM 2.0;", 'include "qelib1.inc";', "qreg", "creg", "q", "c", "r", "[", "]", "(", ")",
    "{", "}", ";", ",", "->", "==", "gate", "opaque", "measure", "reset", "barrier", "if",
    "U", "CX", "h", "cx", "rz", "u3", "ccx", "cu", "sx", "g", "a", "b", "pi", "sin", "ln",
    "sqrt", "+", "-", "*", "/", "^", "0", "1", "2", "3", "1.5", "1e-3", ".5", "1e999",
    "//", "\n", "\r\n", " ", '"', "include", "OPENQASM",
]  # fmt: skip


@SETTINGS
@given(st.text(max_size=300))
def test_random_text(text: str) -> None:
    parse_only_safely(text)


@SETTINGS
@given(st.lists(st.sampled_from(TOKENS), max_size=80))
def test_token_soup(tokens: list[str]) -> None:
    parse_only_safely(HEADER + " ".join(tokens))
    parse_only_safely(" ".join(tokens))


@SETTINGS
@given(
    st.sampled_from(range(max(len(CORPUS_BYTES), 1))),
    st.lists(
        st.tuples(
            st.sampled_from(["insert", "delete", "replace"]),
            st.floats(0, 1, exclude_max=True),
            st.binary(min_size=1, max_size=4),
        ),
        min_size=1,
        max_size=6,
    ),
)
def test_mutated_corpus_files(index: int, edits: list[tuple[str, float, bytes]]) -> None:
    if not CORPUS_BYTES:
        return
    load_bytes_safely(mutated(CORPUS_BYTES[index], edits))


def mutated(original: bytes, edits: list[tuple[str, float, bytes]]) -> bytes:
    """``original`` with each edit applied: insert, delete or replace ``chunk`` at a
    relative position."""
    data = bytearray(original)
    for kind, where, chunk in edits:
        at = int(where * len(data))
        if kind == "insert":
            data[at:at] = chunk
        elif kind == "delete":
            del data[at : at + len(chunk)]
        else:
            data[at : at + len(chunk)] = chunk
    return bytes(data)


@SETTINGS
@given(st.text(max_size=40))
def test_random_include_names(name: str) -> None:
    with tempfile.TemporaryDirectory() as folder:
        base = Path(folder) / "inner"
        base.mkdir()
        (base / "ok.inc").write_text("gate mine a { x a; }\n")
        with contextlib.suppress(CircuitError):
            parse_qasm(HEADER + f'include "{name}";\n', filename="x.qasm", base_dir=base)


def test_corpus_is_there_for_the_mutation_fuzzer(corpus_dir: Path) -> None:
    assert len(CORPUS_BYTES) == 66


# ---- time grows linearly -------------------------------------------------------------


def best_of_3(make: Callable[[int], str], n: int) -> float:
    text = make(n)
    best = float("inf")
    for _ in range(3):
        # CPU time of this process: other processes on a busy machine barely move it.
        start = time.process_time()
        with contextlib.suppress(CircuitError):
            parse_qasm(text)
        best = min(best, time.process_time() - start)
    return best


SHAPES: dict[str, Callable[[int], str]] = {
    "gate lines": lambda n: HEADER + "qreg q[2];\n" + "h q[0];\n" * n,
    "nested parens": lambda n: HEADER + "qreg q[1];\nrz(" + "(" * n + "1" + ")" * n + ") q[0];",
    "unary minus": lambda n: HEADER + "qreg q[1];\nrz(" + "-" * 2 * n + "1) q[0];",
    "power tower": lambda n: HEADER + "qreg q[1];\nrz(" + "1^" * n + "1) q[0];",
    "long sum": lambda n: HEADER + "qreg q[1];\nrz(" + "+".join(["pi"] * n) + ") q[0];",
    "gate chain": lambda n: (
        HEADER
        + "gate g0 a { x a; }\n"
        + "".join(f"gate g{i} a {{ g{i - 1} a; }}\n" for i in range(1, n // 4))
        + f"qreg q[1];\ng{n // 4 - 1} q[0];\n"
    ),
    "long identifier": lambda n: HEADER + "qreg " + "a" * (50 * n) + "[1];",
    "unterminated gate": lambda n: HEADER + "gate g a {" + " h a;" * (n // 2),
    "many registers": lambda n: HEADER + "".join(f"qreg r{i}[1];\n" for i in range(n // 2)),
    "barrier arguments": lambda n: HEADER + "qreg q[100];\nbarrier " + ",".join(["q"] * n) + ";",
    "wide gate": lambda n: (
        HEADER
        + f"gate w {','.join(f'a{i}' for i in range(n))} "
        + f"{{ barrier {','.join(f'a{i}' for i in range(n))}; }}"
    ),
    "gates and includes": lambda n: (
        HEADER + "".join(f'gate g{i} a {{ }}\ninclude "qelib1.inc";\n' for i in range(n // 4))
    ),
}


def test_parse_time_is_linear() -> None:
    # A 10x larger input may take at most 30x longer: generous slack against timer noise
    # and other processes on the machine, while quadratic behaviour shows as ~100x. Each
    # time is the best of three runs, and a shape gets three tries before it counts as slow.
    slow = superlinear(SHAPES)
    assert not slow, f"superlinear parse time: {slow}"


def superlinear(shapes: dict[str, Callable[[int], str]]) -> dict[str, list[float]]:
    """The shapes whose parse time grew more than 30x for 10x the input, three times over
    (with the ratios measured)."""
    slow = {}
    for name, make in shapes.items():
        ratios = []
        for _ in range(3):
            small, large = best_of_3(make, 1_000), best_of_3(make, 10_000)
            ratios.append(large / max(small, 1e-4))
            if ratios[-1] < 30:
                break
        else:
            slow[name] = ratios
    return slow

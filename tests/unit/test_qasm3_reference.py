"""Differential test against the OpenQASM 3 specification's own reference parser (the
``openqasm3`` package with its ANTLR parser, openqasm/openqasm on PyPI): whenever the
reference rejects a program's syntax, jobkeeper rejects the program too. (The converse
does not hold: the reference accepts the whole language, jobkeeper a subset.)

Programs: the specification's examples and invalid statements (../shared/corpus/qasm3),
the feature programs of test_qasm3_twins, and 600 mutations of those (seeded): a token
deleted, doubled, swapped with its neighbour or replaced by a token from a fixed pool.
"""

from __future__ import annotations

import random
import re

from openqasm3 import parser as reference

from jobkeeper.circuit import parse_qasm
from jobkeeper.exceptions import CircuitError
from tests.conftest import shared_path
from tests.unit.test_qasm3_twins import H3, TWINS

MUTATIONS = 600
_TOKEN = re.compile(
    r'"[^"\n]*"|\d+\.\d*(?:[eE][-+]?\d+)?|\.\d+|\w+|->|\*\*|&&|\|\||==|!=|<=|>=|<<|>>|[-+*/]=|\S'
)
_COMMENT = re.compile(r"//[^\n]*|/\*.*?\*/", re.DOTALL)
POOL = [
    ";", ",", "(", ")", "[", "]", "{", "}", "@", "->", "=", "==", ":", "+", "-", "*", "**",
    "if", "else", "for", "in", "gate", "measure", "reset", "barrier", "ctrl", "inv", "pow",
    "negctrl", "qubit", "bit", "int", "uint", "float", "const", "input", "output", "1", "0.5",
    "x", "q", "c", "pi", '"0101"', "true", "!", "~", "&&",
]  # fmt: skip


def reference_rejects(text: str) -> bool:
    try:
        reference.parse(text)
    except reference.QASM3ParsingError:
        return True
    return False


def jobkeeper_rejects(text: str) -> bool:
    try:
        parse_qasm(text, filename="diff.qasm")
    except CircuitError:
        return True
    return False


def seeds() -> list[str]:
    folder = shared_path("corpus", "qasm3", "examples")
    programs = [p.read_text() for p in sorted(folder.glob("*.qasm"))]
    programs += [H3 + three for _, three, _, _ in TWINS if three]
    return programs


def mutate(text: str, rng: random.Random) -> str:
    tokens = _TOKEN.findall(_COMMENT.sub(" ", text))
    for _ in range(rng.randint(1, 3)):
        if not tokens:
            break
        i = rng.randrange(len(tokens))
        kind = rng.choice(["delete", "double", "swap", "replace"])
        if kind == "delete":
            del tokens[i]
        elif kind == "double":
            tokens.insert(i, tokens[i])
        elif kind == "swap" and i + 1 < len(tokens):
            tokens[i], tokens[i + 1] = tokens[i + 1], tokens[i]
        else:
            tokens[i] = rng.choice(POOL)
    return " ".join(tokens)


def test_corpus_programs() -> None:
    for text in seeds():
        if reference_rejects(text):
            assert jobkeeper_rejects(text), text


def test_invalid_statements_are_rejected_by_both() -> None:
    folder = shared_path("corpus", "qasm3", "invalid")
    for path in sorted(folder.glob("*.qasm")):
        for line in path.read_text().splitlines():
            if line.strip() and not line.strip().startswith("//"):
                text = f"OPENQASM 3.0;\nqubit[2] q;\n{line}\n"
                assert jobkeeper_rejects(text), text


def test_mutated_programs() -> None:
    rng = random.Random(20261205)
    programs = seeds()
    rejected_by_reference = 0
    misses = []
    for _ in range(MUTATIONS):
        text = mutate(rng.choice(programs), rng)
        if reference_rejects(text):
            rejected_by_reference += 1
            if not jobkeeper_rejects(text):
                misses.append(text)
    assert not misses, misses[:5]
    # The mutations must exercise the property: most break the syntax.
    assert rejected_by_reference >= MUTATIONS // 2

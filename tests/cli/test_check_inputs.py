"""``jobkeeper check FILE --set NAME=VALUE``: a program's input parameters bound from the
command line, typed as the program declares them; every refusal exits 2 naming the input."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from jobkeeper.circuit import canonical_text, circuit_hash, parse_qasm
from jobkeeper.cli import main

# An invented angle scan: one rotation per qubit up to n, then a measurement.
SCAN = """OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta;
input int n;
input bool flip;
qubit[3] q;
bit[3] c;
for int i in [0:n - 1] { rx(theta) q[i]; }
if (flip) { x q[2]; }
c = measure q;
"""


@pytest.fixture
def scan(tmp_path: Path) -> Path:
    (tmp_path / "scan.qasm").write_text(SCAN)
    return tmp_path / "scan.qasm"


def _check(capsys: pytest.CaptureFixture[str], tmp_path: Path, *args: str) -> tuple[int, str]:
    code = main(["check", *args, "--keep", str(tmp_path / "keep")])
    captured = capsys.readouterr()
    return code, captured.out + captured.err


def test_set_binds_each_input_by_its_type(capsys, tmp_path, scan) -> None:
    code, out = _check(capsys, tmp_path, str(scan), "--set", "theta=0.50", "--set", "n=2",
                       "--set", "flip=true", "--json")  # fmt: skip
    assert code == 0
    report = json.loads(out)
    assert report["inputs"] == {"theta": 0.5, "n": 2, "flip": 1}
    twin = parse_qasm(
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\ncreg c[3];\n'
        "rx(0.5) q[0];\nrx(0.5) q[1];\nx q[2];\nmeasure q -> c;\n"
    )
    assert report["circuit_hash"] == circuit_hash(twin), canonical_text(twin)
    code, out = _check(capsys, tmp_path, str(scan), "--set", "theta=0.50", "--set", "n=2",
                       "--set", "flip=false")  # fmt: skip
    assert code == 0
    assert "inputs: theta=0.50, n=2, flip=false" in out


@pytest.mark.parametrize(
    ("settings", "words"),
    [
        ([], "input(s) without a value: theta, n, flip"),
        (["theta=1", "n=1"], "input(s) without a value: flip"),
        (["theta=1", "n=1", "flip=true", "phi=2"], "no input named phi (the program's inputs: theta, n, flip)"),
        (["theta=abc", "n=1", "flip=true"], "input theta (float) needs a decimal number, got 'abc'"),
        (["theta=nan", "n=1", "flip=true"], "input theta (float) needs a decimal number"),
        (["theta=1e999", "n=1", "flip=true"], "input theta (float): 1e999 is not a finite float"),
        (["theta=1", "n=2.5", "flip=true"], "input n (int) needs an integer, got '2.5'"),
        (["theta=1", "n=1", "flip=yes"], "input flip (bool) needs true or false, got 'yes'"),
        (["theta"], "--set takes NAME=VALUE, got 'theta'"),
        (["theta=1", "theta=2"], "--set gives input theta more than once"),
    ],
)  # fmt: skip
def test_refusals_exit_2_naming_the_input(capsys, tmp_path, scan, settings, words) -> None:
    args = [str(scan)]
    for item in settings:
        args += ["--set", item]
    code, out = _check(capsys, tmp_path, *args)
    assert code == 2
    assert words in out
    assert "Traceback" not in out and out.count("\n") == 1


def test_an_openqasm_2_program_has_no_inputs(capsys, tmp_path) -> None:
    bell = tmp_path / "bell.qasm"
    bell.write_text('OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[2];\ncreg c[2];\nh q[0];\n')
    assert _check(capsys, tmp_path, str(bell))[0] == 0
    code, out = _check(capsys, tmp_path, str(bell), "--set", "x=1")
    assert code == 2
    assert "no input named x (the program's inputs: none)" in out

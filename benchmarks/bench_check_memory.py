"""Memory of `jobkeeper check` on a large circuit file.

An invented OpenQASM 2.0 program of 10 MB (20 qubits, about 600,000 gates: rotations and
CNOTs in layers) is checked in a fresh process; its peak resident memory (the kernel's
``ru_maxrss`` of that process) is compared with the peak of the same command on a
two-qubit circuit, measured in the same run (the interpreter and its imports). Target:
the large file adds at most 20 bytes of peak memory per byte of circuit text (the text
is read once and tokens are made as the parser needs them; the circuit's operations
themselves stay in memory). Measured: 15.3 (233 MiB peak against 79 MiB); before tokens
were streamed, 72.5 (804 MiB).

``--quick`` uses a 1 MB file (a smoke run; the target is the 10 MB run's).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

TARGET_PER_BYTE = 20.0
CHECK = "import sys; from jobkeeper.cli import main; sys.exit(main())"


def invented_circuit(size: int, qubits: int = 20) -> str:
    """Layers of rz and cx on ``qubits`` qubits until the text is ``size`` bytes long."""
    lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{qubits}];", f"creg c[{qubits}];"]
    total = sum(len(line) + 1 for line in lines)
    layer = 0
    while total < size:
        for i in range(qubits):
            angle = 0.1 + 0.001 * ((layer * qubits + i) % 997)
            for line in (f"rz({angle:.6f}) q[{i}];", f"cx q[{i}],q[{(i + 1) % qubits}];"):
                lines.append(line)
                total += len(line) + 1
        layer += 1
    return "\n".join([*lines, "measure q -> c;"]) + "\n"


def peak_rss(args: list[str], cwd: Path) -> int:
    """Peak resident bytes of ``jobkeeper ARGS`` run in a fresh interpreter."""
    proc = subprocess.Popen(
        [sys.executable, "-c", CHECK, *args], cwd=cwd,
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
    )  # fmt: skip
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
        raise SystemExit(f"jobkeeper {' '.join(args)} failed: {err[-500:]}")
    if proc.stderr is not None:
        proc.stderr.close()
    return int(usage.ru_maxrss) * 1024  # kilobytes on Linux


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true")
    size = (1 if parser.parse_args().quick else 10) * 1024 * 1024
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        (work / "big.qasm").write_text(invented_circuit(size))
        (work / "small.qasm").write_text(invented_circuit(0, qubits=2))
        keep = ["--keep", str(work / "keep")]
        subprocess.run(
            [sys.executable, "-c", CHECK, "init", *keep], cwd=work, capture_output=True,
            check=True,
        )  # fmt: skip
        baseline = peak_rss(["check", "small.qasm", *keep], work)
        peak = peak_rss(["check", "big.qasm", *keep], work)
    per_byte = (peak - baseline) / size
    verdict = "PASS" if per_byte <= TARGET_PER_BYTE else "MISS"
    print(f"check peak RSS: two-qubit circuit {baseline / 2**20:.0f} MiB, "
          f"{size / 2**20:.0f} MiB circuit {peak / 2**20:.0f} MiB")  # fmt: skip
    print(f"added peak per byte of circuit text: {per_byte:.1f} "
          f"(target <= {TARGET_PER_BYTE:.0f}) {verdict}")  # fmt: skip
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""A job with many distinct outcomes goes through the keep as a CountTable (arrays) and
comes out exactly as the dict path would have made it, signed, logged and verifiable."""

from __future__ import annotations

from pathlib import Path

import pytest

from jobkeeper import Keeper
from jobkeeper.backend import Task
from jobkeeper.backends.sim import sampling
from jobkeeper.backends.sim.statevector import StatevectorBackend
from jobkeeper.circuit import parse_qasm
from jobkeeper.counts import CountTable

# 13 qubits in uniform superposition (h on each: textbook, N&C §1.4.4), two registers so
# that the bit strings carry a space: 8,192 outcomes, of which 20,000 shots see most.
CIRCUIT = (
    'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[13];\ncreg a[6];\ncreg b[7];\nh q;\n'
    + "".join(f"measure q[{i}] -> a[{i}];\n" for i in range(6))
    + "".join(f"measure q[{6 + i}] -> b[{i}];\n" for i in range(7))
)


def test_the_backend_gives_a_table_equal_to_the_dict_it_would_have_made(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    circuit = parse_qasm(CIRCUIT)
    table = StatevectorBackend().execute(Task(circuit, 20_000, seed=3)).counts
    assert isinstance(table, CountTable) and len(table) > sampling.TABLE_FROM
    monkeypatch.setattr(sampling, "TABLE_FROM", 10**9)
    plain = StatevectorBackend().execute(Task(circuit, 20_000, seed=3)).counts
    assert isinstance(plain, dict)
    assert table.to_dict() == plain and sum(plain.values()) == 20_000
    assert all(len(key) == 14 and key[6] == "|" for key in plain)  # "a|b": 6 bits, "|", 7


@pytest.mark.slow
def test_a_big_table_is_archived_signed_and_verifies(tmp_path: Path) -> None:
    keep = tmp_path / "keep"
    with Keeper.open(keep) as keeper:
        job = keeper.run(CIRCUIT, shots=20_000, seed=3)
        counts = job.counts
        direct = StatevectorBackend().execute(Task(parse_qasm(CIRCUIT), 20_000, seed=3)).counts
        assert counts == dict(direct) and len(counts) > sampling.TABLE_FROM
        report = keeper.verify()
        assert report.ok, report.problems
        assert report.checked >= 1
        assert keeper.bundle(tmp_path / "big.bundle", [job.id]) == 1
        fingerprint = keeper.keys()[0].fingerprint
    offline = Keeper.verify_bundle(tmp_path / "big.bundle", trusted=[fingerprint])
    assert offline.ok, offline.problems


def test_records_that_print_the_same_string_add_up(monkeypatch: pytest.MonkeyPatch) -> None:
    # A mid-circuit measurement of q[0] into c[0], later overwritten by the final one:
    # two classical records whose outcomes print identically, so the table's rows from
    # both records must merge, exactly as the dict path adds them.
    text = (
        'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[13];\ncreg c[13];\nh q;\n'
        "measure q[0] -> c[0];\nh q[0];\nmeasure q -> c;\n"
    )
    circuit = parse_qasm(text)
    table = StatevectorBackend().execute(Task(circuit, 30_000, seed=9)).counts
    assert isinstance(table, CountTable)
    assert len(table._parts) == 2  # one part per classical record
    assert len(table) < sum(len(values) for _, values in table._parts)  # rows merged
    monkeypatch.setattr(sampling, "TABLE_FROM", 10**9)
    plain = StatevectorBackend().execute(Task(circuit, 30_000, seed=9)).counts
    assert table.to_dict() == plain and table.shots == 30_000

"""RFC 9162 Merkle tree: roots, proof generation and verification."""

from __future__ import annotations

import base64
import hashlib
import json
from pathlib import Path
from typing import Any

import pytest

from jobkeeper.exceptions import VerificationError
from jobkeeper.provenance import (
    EMPTY_ROOT,
    MerkleTree,
    consistency_proof,
    inclusion_proof,
    leaf_hash,
    node_hash,
    root,
    verify_consistency,
    verify_inclusion,
)


def _mth(leaves: list[bytes]) -> bytes:
    # The RFC 9162 §2.1.1 definition, written out recursively as an independent reference.
    if not leaves:
        return hashlib.sha256(b"").digest()
    if len(leaves) == 1:
        return hashlib.sha256(b"\x00" + leaves[0]).digest()
    k = 1
    while k * 2 < len(leaves):
        k *= 2
    return hashlib.sha256(b"\x01" + _mth(leaves[:k]) + _mth(leaves[k:])).digest()


def _b64(text: str) -> bytes:
    return base64.b64decode(text) if text else b""


def _case_files(vectors_dir: Path, kind: str) -> list[Path]:
    # rglob, not glob patterns: some names contain @, [ and ] (SOURCES.md §1).
    return sorted((vectors_dir / "merkle" / kind).rglob("*.json"))


def test_roots_of_the_standard_leaves(vectors_dir: Path) -> None:
    # Source: transparency-dev/merkle testonly/constants.go via vectors/merkle/roots.json.
    data = json.loads((vectors_dir / "merkle" / "roots.json").read_text())
    inputs = [bytes.fromhex(x) for x in data["leaf_inputs"]]
    assert [leaf_hash(x).hex() for x in inputs] == data["leaf_hashes"]
    assert EMPTY_ROOT.hex() == data["empty_tree_root"] == root([]).hex()
    tree = MerkleTree(leaf_hash(x) for x in inputs)
    assert len(data["roots"]) == 8
    for item in data["roots"]:
        n = item["tree_size"]
        assert root([leaf_hash(x) for x in inputs[:n]]).hex() == item["root"]
        assert tree.root(n).hex() == item["root"]
        assert _mth(inputs[:n]).hex() == item["root"]


def _run_inclusion(case: dict[str, Any]) -> None:
    verify_inclusion(
        case["leafIdx"],
        case["treeSize"],
        _b64(case["leafHash"]),
        [_b64(p) for p in case["proof"] or []],
        _b64(case["root"]),
    )


def _run_consistency(case: dict[str, Any]) -> None:
    verify_consistency(
        case["size1"],
        case["size2"],
        _b64(case["root1"]),
        _b64(case["root2"]),
        [_b64(p) for p in case["proof"] or []],
    )


@pytest.mark.parametrize("kind", ["inclusion", "consistency"])
def test_all_transparency_dev_proof_vectors(vectors_dir: Path, kind: str) -> None:
    # Source: transparency-dev/merkle testdata/{inclusion,consistency}/** (published).
    # Edge rules follow proof/verify.go, including equal sizes compared without a length
    # check (additional/sizes-are-equal-one-and-proof-is-empty.json succeeds).
    run = _run_inclusion if kind == "inclusion" else _run_consistency
    files = _case_files(vectors_dir, kind)
    assert len(files) == 98
    passed = []
    for path in files:
        case = json.loads(path.read_text())
        if case["wantErr"]:
            with pytest.raises(VerificationError):
                run(case)
        else:
            run(case)
            passed.append(path.relative_to(vectors_dir / "merkle" / kind).as_posix())
    expected = {f"{i}/happy-path.json" for i in range(5)}
    expected.add(
        "single-entry/matching-root-and-leaf.json"
        if kind == "inclusion"
        else "additional/sizes-are-equal-one-and-proof-is-empty.json"
    )
    assert set(passed) == expected


def test_published_proofs_are_generated(vectors_dir: Path) -> None:
    # Source: the happy-path files of transparency-dev/merkle are proofs over the 8
    # standard leaves; our generator must produce them exactly.
    data = json.loads((vectors_dir / "merkle" / "roots.json").read_text())
    leaves = [leaf_hash(bytes.fromhex(x)) for x in data["leaf_inputs"]]
    for path in _case_files(vectors_dir, "inclusion"):
        case = json.loads(path.read_text())
        if path.name == "happy-path.json":
            got = inclusion_proof(case["leafIdx"], leaves[: case["treeSize"]])
            assert [base64.b64encode(h).decode() for h in got] == (case["proof"] or [])
    for path in _case_files(vectors_dir, "consistency"):
        case = json.loads(path.read_text())
        if path.name == "happy-path.json":
            got = consistency_proof(case["size1"], leaves[: case["size2"]])
            assert [base64.b64encode(h).decode() for h in got] == (case["proof"] or [])


def test_generated_proofs_verify_for_all_sizes_up_to_64() -> None:
    # Round trip (no outside source): every inclusion and consistency proof our tree
    # generates verifies, and roots agree with the recursive RFC definition.
    entries = [i.to_bytes(2, "big") for i in range(64)]
    leaves = [leaf_hash(e) for e in entries]
    tree = MerkleTree(leaves)
    roots = [tree.root(n) for n in range(65)]
    for n in range(1, 65):
        assert roots[n] == _mth(entries[:n])
        for i in range(n):
            proof = tree.inclusion_proof(i, n)
            assert proof == inclusion_proof(i, leaves[:n])
            verify_inclusion(i, n, leaves[i], proof, roots[n])
            with pytest.raises(VerificationError):
                verify_inclusion(i, n, leaves[(i + 1) % 64], proof, roots[n])
        for m in range(1, n + 1):
            proof = tree.consistency_proof(m, n)
            verify_consistency(m, n, roots[m], roots[n], proof)
            if m < n:
                with pytest.raises(VerificationError):
                    verify_consistency(m, n, roots[m - 1] if m > 1 else roots[2], roots[n], proof)


def test_incremental_tree_matches_rebuild_for_large_sizes() -> None:
    leaves = [leaf_hash(i.to_bytes(4, "big")) for i in range(3000)]
    tree = MerkleTree()
    for h in leaves:
        tree.append(h)
    for n in (1, 2, 3, 1000, 1023, 1024, 1025, 2047, 2999, 3000):
        assert tree.root(n) == _mth([i.to_bytes(4, "big") for i in range(n)])


def test_edge_rules_raise_verification_error_only() -> None:
    h = leaf_hash(b"x")
    with pytest.raises(VerificationError, match="empty tree"):
        verify_consistency(0, 0, EMPTY_ROOT, EMPTY_ROOT, [])
    with pytest.raises(VerificationError, match="smaller"):
        verify_consistency(3, 2, h, h, [h])
    with pytest.raises(VerificationError, match="not empty"):
        verify_consistency(2, 2, h, h, [h])
    with pytest.raises(VerificationError, match="32"):
        verify_inclusion(0, 1, h[:31], [], h)
    with pytest.raises(VerificationError, match="needs"):
        verify_inclusion(0, 2, h, [h, h], node_hash(h, h))
    with pytest.raises(VerificationError):
        verify_inclusion(-1, 2, h, [h], h)


def test_leaf_cannot_pose_as_node() -> None:
    # Standards note §7 test 15: 0x01‖h0‖h1 offered as a single leaf gives another root.
    h0, h1 = leaf_hash(b"a"), leaf_hash(b"b")
    two = root([h0, h1])
    assert root([leaf_hash(h0 + h1)]) != two
    with pytest.raises(VerificationError):
        verify_inclusion(0, 1, leaf_hash(b"\x01" + h0 + h1), [], two)

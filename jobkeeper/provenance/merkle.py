"""RFC 9162 §2.1 Merkle tree (SHA-256): hashing, proofs, verification, incremental tree.

Leaves and interior nodes are domain-separated (0x00 / 0x01 prefixes) so a leaf can never
pose as a node. Verification follows RFC 9162 §2.1.3.2 and §2.1.4.2 with the edge rules of
the transparency-dev/merkle reference verifier (proof/verify.go), whose published test
corpus our tests run in full:

- inclusion: index < size, the leaf hash has 32 bytes, the proof has exactly the length
  the tree shape demands;
- consistency: size1 > size2 fails; size1 = 0 fails (a proof from the empty tree means
  nothing); size1 = size2 needs an empty proof and byte-equal roots (compared as given, as
  the reference does); otherwise a non-empty proof of exactly the demanded length;
- every proof element must be 32 bytes (stricter than the reference, same verdicts).

Every failure raises VerificationError, never another exception.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Sequence

from jobkeeper.exceptions import VerificationError

HASH_SIZE = 32
EMPTY_ROOT = hashlib.sha256(b"").digest()


def leaf_hash(entry: bytes) -> bytes:
    """SHA-256(0x00 ‖ entry)."""
    return hashlib.sha256(b"\x00" + entry).digest()


def node_hash(left: bytes, right: bytes) -> bytes:
    """SHA-256(0x01 ‖ left ‖ right)."""
    return hashlib.sha256(b"\x01" + left + right).digest()


def _split(n: int) -> int:
    """Largest power of two strictly smaller than n (n ≥ 2)."""
    return 1 << ((n - 1).bit_length() - 1)


class MerkleTree:
    """Append-only tree over leaf hashes.

    ``levels[h][i]`` is the hash of the complete subtree of 2^h leaves starting at leaf
    i·2^h, filled in as soon as it is complete. Append is amortised O(1) (O(log n) worst),
    the root of any prefix size is O(log n), proofs are O(log² n); memory is about 2n
    hashes. Every proof and root for a past size stays available, which is what checking
    old checkpoints needs.
    """

    def __init__(self, leaf_hashes: Iterable[bytes] = ()) -> None:
        self.levels: list[list[bytes]] = [[]]
        for h in leaf_hashes:
            self.append(h)

    @property
    def size(self) -> int:
        return len(self.levels[0])

    def append(self, leaf: bytes) -> int:
        """Add a leaf hash (32 bytes); returns its index."""
        if len(leaf) != HASH_SIZE:
            raise ValueError(f"a leaf hash has 32 bytes, not {len(leaf)}")
        index = self.size
        self.levels[0].append(leaf)
        level, i = 0, index
        # Each time the new node is a right child, its parent subtree is now complete.
        while i & 1:
            left = self.levels[level][i - 1]
            right = self.levels[level][i]
            level += 1
            if level == len(self.levels):
                self.levels.append([])
            self.levels[level].append(node_hash(left, right))
            i >>= 1
        return index

    def append_entry(self, entry: bytes) -> int:
        """Hash raw entry bytes as a leaf and append it."""
        return self.append(leaf_hash(entry))

    def _mth(self, lo: int, hi: int) -> bytes:
        """MTH of leaves [lo, hi); lo is aligned as in the RFC's recursive split."""
        n = hi - lo
        if n & (n - 1) == 0:
            level = n.bit_length() - 1
            return self.levels[level][lo >> level]
        k = _split(n)
        return node_hash(self._mth(lo, lo + k), self._mth(lo + k, hi))

    def _check_size(self, size: int | None) -> int:
        if size is None:
            return self.size
        if not 0 <= size <= self.size:
            raise ValueError(f"size {size} is outside 0..{self.size}")
        return size

    def root(self, size: int | None = None) -> bytes:
        """Root hash of the first ``size`` leaves (all by default); EMPTY_ROOT for none."""
        size = self._check_size(size)
        if size == 0:
            return EMPTY_ROOT
        # Perfect subtrees by the binary digits of size, largest first, folded from the right.
        peaks: list[bytes] = []
        lo = 0
        for level in range(size.bit_length() - 1, -1, -1):
            if size >> level & 1:
                peaks.append(self.levels[level][lo >> level])
                lo += 1 << level
        acc = peaks[-1]
        for peak in reversed(peaks[:-1]):
            acc = node_hash(peak, acc)
        return acc

    def inclusion_proof(self, index: int, size: int | None = None) -> list[bytes]:
        """Audit path of leaf ``index`` in the tree of the first ``size`` leaves (§2.1.3.1)."""
        size = self._check_size(size)
        if not 0 <= index < size:
            raise ValueError(f"index {index} is outside 0..{size - 1}")
        proof: list[bytes] = []
        lo, hi, m = 0, size, index
        while hi - lo > 1:
            k = _split(hi - lo)
            if m < k:
                proof.append(self._mth(lo + k, hi))
                hi = lo + k
            else:
                proof.append(self._mth(lo, lo + k))
                lo, m = lo + k, m - k
        proof.reverse()  # generated root-down; the proof runs leaf-up
        return proof

    def consistency_proof(self, size1: int, size2: int | None = None) -> list[bytes]:
        """Consistency proof from size1 to size2 (§2.1.4.1); 0 < size1 ≤ size2."""
        size2 = self._check_size(size2)
        if not 0 < size1 <= size2:
            raise ValueError(f"need 0 < size1 ≤ size2, got {size1} and {size2}")
        proof: list[bytes] = []
        lo, hi, m, complete = 0, size2, size1, True
        while m != hi - lo:
            k = _split(hi - lo)
            if m <= k:
                proof.append(self._mth(lo + k, hi))
                hi = lo + k
            else:
                proof.append(self._mth(lo, lo + k))
                lo, m, complete = lo + k, m - k, False
        if not complete:
            proof.append(self._mth(lo, hi))
        proof.reverse()
        return proof


def root(leaf_hashes: Sequence[bytes]) -> bytes:
    """Merkle Tree Hash over leaf hashes (EMPTY_ROOT for none)."""
    return MerkleTree(leaf_hashes).root()


def inclusion_proof(index: int, leaf_hashes: Sequence[bytes]) -> list[bytes]:
    """Audit path of leaf ``index`` in the tree over ``leaf_hashes``."""
    return MerkleTree(leaf_hashes).inclusion_proof(index)


def consistency_proof(m: int, leaf_hashes: Sequence[bytes]) -> list[bytes]:
    """Consistency proof from the first ``m`` leaves to all of ``leaf_hashes``."""
    return MerkleTree(leaf_hashes).consistency_proof(m)


# ---------------------------------------------------------------------------------------
# Verification


def _inclusion_shape(index: int, size: int) -> tuple[int, int]:
    """(inner, border): proof length is inner + border for leaf index in a tree of size."""
    inner = (index ^ (size - 1)).bit_length()
    border = (index >> inner).bit_count()
    return inner, border


def _check_hashes(proof: Sequence[bytes]) -> None:
    for i, h in enumerate(proof):
        if not isinstance(h, bytes) or len(h) != HASH_SIZE:
            raise VerificationError(f"proof element {i} is not a 32-byte hash")


def root_from_inclusion(index: int, size: int, leaf: bytes, proof: Sequence[bytes]) -> bytes:
    """The root an inclusion proof leads to (RFC 9162 §2.1.3.2 steps 1–3, without the
    final comparison). VerificationError if the inputs cannot form a proof."""
    if index < 0 or size < 0:
        raise VerificationError("index and size must not be negative")
    if index >= size:
        raise VerificationError(f"leaf index {index} is not below tree size {size}")
    if not isinstance(leaf, bytes) or len(leaf) != HASH_SIZE:
        raise VerificationError("leaf hash is not 32 bytes")
    inner, border = _inclusion_shape(index, size)
    if len(proof) != inner + border:
        raise VerificationError(
            f"inclusion proof has {len(proof)} hashes; a tree of size {size} needs {inner + border}"
        )
    _check_hashes(proof)
    fn, sn, r = index, size - 1, leaf
    for p in proof:
        if sn == 0:
            raise VerificationError("inclusion proof is too long")
        if fn & 1 or fn == sn:
            r = node_hash(p, r)
            if not fn & 1:
                while fn and not fn & 1:
                    fn >>= 1
                    sn >>= 1
        else:
            r = node_hash(r, p)
        fn >>= 1
        sn >>= 1
    if sn != 0:
        raise VerificationError("inclusion proof is too short")
    return r


def verify_inclusion(
    index: int, size: int, leaf: bytes, proof: Sequence[bytes], root: bytes
) -> None:
    """Check that ``leaf`` (a leaf hash) sits at ``index`` of the tree of ``size`` with
    ``root``. Raises VerificationError when it does not."""
    if root_from_inclusion(index, size, leaf, proof) != root:
        raise VerificationError(
            f"inclusion proof for leaf {index} does not lead to the root of size {size}"
        )


def verify_consistency(
    size1: int, size2: int, root1: bytes, root2: bytes, proof: Sequence[bytes]
) -> None:
    """Check that the tree of ``size2``/``root2`` extends the tree of ``size1``/``root1``
    (RFC 9162 §2.1.4.2 plus the reference edge rules). Raises VerificationError."""
    if size1 < 0 or size2 < 0:
        raise VerificationError("tree sizes must not be negative")
    if size2 < size1:
        raise VerificationError(f"size2 ({size2}) is smaller than size1 ({size1})")
    if size1 == 0:
        raise VerificationError("a consistency proof from the empty tree is meaningless")
    if size1 == size2:
        if proof:
            raise VerificationError("sizes are equal but the proof is not empty")
        if root1 != root2:
            raise VerificationError(f"two different roots for the same size {size1}")
        return
    if not proof:
        raise VerificationError("consistency proof is empty")
    if len(root1) != HASH_SIZE or len(root2) != HASH_SIZE:
        raise VerificationError("roots must be 32-byte hashes")
    _check_hashes(proof)
    # Exact length: the proof is the inclusion path of leaf size1-1 in size2, minus the
    # levels below the largest complete subtree ending at size1, plus that subtree's hash
    # unless size1 is itself a power of two (then root1 is that hash).
    shift = (size1 & -size1).bit_length() - 1
    inner, border = _inclusion_shape(size1 - 1, size2)
    start = 0 if size1 == 1 << shift else 1
    want = start + inner - shift + border
    if len(proof) != want:
        raise VerificationError(
            f"consistency proof has {len(proof)} hashes; {size1}→{size2} needs {want}"
        )
    c = list(proof)
    if size1 == 1 << shift:
        c.insert(0, root1)
    fn, sn = size1 - 1, size2 - 1
    while fn & 1:
        fn >>= 1
        sn >>= 1
    fr = sr = c[0]
    for p in c[1:]:
        if sn == 0:
            raise VerificationError("consistency proof is too long")
        if fn & 1 or fn == sn:
            fr = node_hash(p, fr)
            sr = node_hash(p, sr)
            if not fn & 1:
                while fn and not fn & 1:
                    fn >>= 1
                    sn >>= 1
        else:
            sr = node_hash(sr, p)
        fn >>= 1
        sn >>= 1
    if sn != 0:
        raise VerificationError("consistency proof is too short")
    if fr != root1:
        raise VerificationError(f"consistency proof does not lead to the first root (size {size1})")
    if sr != root2:
        raise VerificationError(
            f"consistency proof does not lead to the second root (size {size2})"
        )

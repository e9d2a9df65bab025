"""The RFC 9162 Merkle tree: the Certificate Transparency reference vectors, and properties
(every proof verifies, every tampered proof fails) over many sizes."""

from __future__ import annotations

import hashlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.records.merkle import (
    EMPTY_ROOT,
    Frontier,
    MemoryTree,
    consistency_ranges,
    inclusion_ranges,
    leaf_hash,
    node_hash,
    verify_consistency,
    verify_inclusion,
)

# The eight leaf inputs, the node hashes of every perfect subtree and the roots of every
# prefix, copied from transparency-dev/merkle testonly/constants.go (LeafInputs,
# NodeHashes, RootHashes): the vectors of RFC 6962's reference implementation.
LEAVES = [bytes.fromhex(h) for h in ["", "00", "10", "2021", "3031", "40414243",
                                     "5051525354555657", "606162636465666768696a6b6c6d6e6f"]]
NODES = [
    ["6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
     "96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
     "0298d122906dcfc10892cb53a73992fc5b9f493ea4c9badb27b791b4127a7fe7",
     "07506a85fd9dd2f120eb694f86011e5bb4662e5c415a62917033d4a9624487e7",
     "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
     "4271a26be0d8a84f0bd54c8c302e7cb3a3b5d1fa6780a40bcce2873477dab658",
     "b08693ec2e721597130641e8211e7eedccb4c26413963eee6c1e2ed16ffb1a5f",
     "46f6ffadd3d06a09ff3c5860d2755c8b9819db7df44251788c7d8e3180de8eb1"],
    ["fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125",
     "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
     "0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
     "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0"],
    ["d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
     "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4"],
    ["5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328"],
]
ROOTS = ["e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855",
         "6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
         "fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125",
         "aeb6bcfe274b70a14fb067a5e5578264db0fa9b51af5e0ba159158f329e06e77",
         "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7",
         "4e3bbb1f7b478dcfe71fb631631519a3bca12c9aefca1612bfce4c13a86264d4",
         "76e67dadbcdf1e10e1b74ddc608abd2f98dfb16fbce75277b5232a127f2087ef",
         "ddb89be403809e325750d3d263cd78929c2942b7942a34b77e122c9594a74c8c",
         "5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328"]

# (leaf number counting from 1, tree size, proof) and (size 1, size 2, proof), copied from
# transparency-dev/merkle proof/verify_test.go (inclusionProofs, consistencyProofs).
INCLUSION = [
    (1, 1, []),
    (1, 8, ["96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4"]),
    (6, 8, ["bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7"]),
    (3, 3, ["fac54203e7cc696cf0dfcb42c92a1d9dbaf70ad9e621f4bd8d98662f00e3c125"]),
    (2, 5, ["6e340b9cffb37a989ca544e6bb780a2c78901d3fb33738768511a30617afa01d",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b"]),
]
CONSISTENCY = [
    (1, 1, []),
    (1, 8, ["96a296d224f285c67bee93c30f8a309157f0daa35dc5b87e410b78630a09cfc7",
            "5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "6b47aaf29ee3c2af9af889bc1fb9254dabd31177f16232dd6aab035ca39bf6e4"]),
    (6, 8, ["0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
            "ca854ea128ed050b41b35ffc1b87b8eb2bde461e9e3b5596ece6b9d5975a0ae0",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7"]),
    (2, 5, ["5f083f0a1a33ca076a95279832580db3e0ef4584bdff1f54c8a360f50de3031e",
            "bc1a0643b12e4d2d7c77918f44e0f4f79a838b6cf9ec5b5c283e1f4d88599e6b"]),
    (6, 7, ["0ebc5d3437fbe2db158b9f126a1d118e308181031d0a949f8dededebc558ef6a",
            "b08693ec2e721597130641e8211e7eedccb4c26413963eee6c1e2ed16ffb1a5f",
            "d37ee418976dd95753c1c73862b9398fa2a2cf9b4ff0fdfe8b30cd95209614b7"]),
]

TREE = MemoryTree(map(leaf_hash, LEAVES))


def test_hash_prefixes() -> None:
    # RFC 9162 §2.1.1: MTH({}) = SHA-256(); leaves and nodes carry 0x00 and 0x01
    assert EMPTY_ROOT.hex() == ROOTS[0]
    assert leaf_hash(b"x") == hashlib.sha256(b"\x00x").digest()
    assert node_hash(b"a", b"b") == hashlib.sha256(b"\x01ab").digest()


def test_every_perfect_node_matches_the_reference() -> None:
    # transparency-dev/merkle testonly/constants.go NodeHashes
    assert [[h.hex() for h in row] for row in TREE.levels] == NODES


@pytest.mark.parametrize("size", range(len(ROOTS)))
def test_roots_of_every_prefix(size: int) -> None:
    # transparency-dev/merkle testonly/constants.go RootHashes
    assert TREE.root(size).hex() == ROOTS[size]
    frontier = Frontier()
    for leaf in LEAVES[:size]:
        frontier.append(leaf_hash(leaf))
    assert frontier.root().hex() == ROOTS[size]


@pytest.mark.parametrize(("number", "size", "proof"), INCLUSION)
def test_inclusion_vectors(number: int, size: int, proof: list[str]) -> None:
    # transparency-dev/merkle proof/verify_test.go inclusionProofs
    generated = TREE.inclusion_proof(number - 1, size)
    assert [h.hex() for h in generated] == proof
    assert verify_inclusion(leaf_hash(LEAVES[number - 1]), number - 1, size,
                            [bytes.fromhex(h) for h in proof], bytes.fromhex(ROOTS[size]))


@pytest.mark.parametrize(("old", "new", "proof"), CONSISTENCY)
def test_consistency_vectors(old: int, new: int, proof: list[str]) -> None:
    # transparency-dev/merkle proof/verify_test.go consistencyProofs
    assert [h.hex() for h in TREE.consistency_proof(old, new)] == proof
    assert verify_consistency(old, new, bytes.fromhex(ROOTS[old]), bytes.fromhex(ROOTS[new]),
                              [bytes.fromhex(h) for h in proof])


def test_edge_cases_of_consistency() -> None:
    root3, root5 = TREE.root(3), TREE.root(5)
    assert verify_consistency(0, 5, EMPTY_ROOT, root5, [])       # every tree extends {}
    assert not verify_consistency(0, 5, EMPTY_ROOT, root5, [root3])
    assert verify_consistency(5, 5, root5, root5, [])
    assert not verify_consistency(5, 5, root5, root3, [])
    assert not verify_consistency(5, 3, root5, root3, [])
    assert not verify_consistency(3, 5, root3, root5, [])         # empty path: step 1
    with pytest.raises(ValueError, match="need 0 < from <= to"):
        consistency_ranges(0, 5)
    with pytest.raises(ValueError, match="outside a tree of 5 leaves"):
        inclusion_ranges(5, 5)


def _tree(n: int) -> MemoryTree:
    return MemoryTree(leaf_hash(i.to_bytes(4, "big")) for i in range(n))


def _tamper(proof: list[bytes], which: int, how: str) -> list[bytes]:
    changed = list(proof)
    if how == "flip":
        h = bytearray(changed[which])
        h[which % 32] ^= 1
        changed[which] = bytes(h)
    elif how == "drop":
        del changed[which]
    elif how == "extra":
        changed.insert(which, changed[which])
    else:
        changed[which], changed[-1 - which] = changed[-1 - which], changed[which]
    return changed


@settings(max_examples=300, deadline=None)
@given(st.integers(1, 300), st.data())
def test_every_inclusion_proof_verifies_and_tampering_fails(size: int, data) -> None:
    tree = _tree(size)
    index = data.draw(st.integers(0, size - 1))
    proof = tree.inclusion_proof(index)
    root = tree.root()
    leaf = tree[(0, index)]
    assert verify_inclusion(leaf, index, size, proof, root)
    assert not verify_inclusion(node_hash(leaf, leaf), index, size, proof, root)
    if size > 1:
        assert not verify_inclusion(leaf, index, size, proof, tree.root(size - 1))
        other = data.draw(st.integers(0, size - 1).filter(lambda i: i != index))
        assert not verify_inclusion(leaf, other, size, proof, root)
    if proof:
        which = data.draw(st.integers(0, len(proof) - 1))
        how = data.draw(st.sampled_from(["flip", "drop", "extra", "swap"]))
        tampered = _tamper(proof, which, how)
        if tampered != proof:
            assert not verify_inclusion(leaf, index, size, tampered, root)


@settings(max_examples=300, deadline=None)
@given(st.integers(1, 300), st.data())
def test_every_consistency_proof_verifies_and_tampering_fails(new: int, data) -> None:
    tree = _tree(new)
    old = data.draw(st.integers(1, new))
    proof = tree.consistency_proof(old, new)
    old_root, new_root = tree.root(old), tree.root(new)
    assert verify_consistency(old, new, old_root, new_root, proof)
    if old < new:
        # A different history of the same size is not consistent with it.
        forked = MemoryTree([*tree.levels[0][:old - 1], leaf_hash(b"forged")])
        assert not verify_consistency(old, new, forked.root(), new_root, proof)
        assert not verify_consistency(old, new, old_root, tree.root(new - 1), proof)
        which = data.draw(st.integers(0, len(proof) - 1))
        how = data.draw(st.sampled_from(["flip", "drop", "extra", "swap"]))
        tampered = _tamper(proof, which, how)
        if tampered != proof:
            assert not verify_consistency(old, new, old_root, new_root, tampered)


@pytest.mark.parametrize("n", [1, 2, 3, 7, 8, 9, 100, 1023, 1024, 1025])
def test_frontier_writes_exactly_the_perfect_nodes(n: int) -> None:
    # The nodes a store writes per append, over the whole history, are the tree's perfect
    # nodes, each once; and the frontier's root is the tree's root at every size.
    tree = _tree(n)
    frontier, written = Frontier(), {}
    for i in range(n):
        for level, index, value in frontier.append(tree[(0, i)]):
            assert (level, index) not in written
            written[(level, index)] = value
        assert frontier.root() == tree.root(i + 1)
    assert written == dict(tree.items())


def test_frontier_refuses_an_inconsistent_state() -> None:
    with pytest.raises(ValueError, match="a frontier of 3 leaves has 2 subtrees, not 1"):
        Frontier(3, [EMPTY_ROOT])

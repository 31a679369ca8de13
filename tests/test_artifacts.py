"""Content-addressed store: names are sha256 (FIPS 180-4, via hashlib), writes are atomic.

Reference digests: hashlib.sha256 (Python standard library), and the FIPS 180-2 appendix
B.1 test vector sha256("abc") = ba7816bf...f20015ad.
"""

from __future__ import annotations

import errno
import hashlib
import os

import numpy as np
import pytest

from storage.artifacts import ArtifactStore
from storage.errors import ArtifactCorrupt, BadInput, StoreFull, TooLarge

ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"  # FIPS 180-2 B.1


@pytest.fixture
def store(tmp_path):
    return ArtifactStore(tmp_path / "store")


def _staging_empty(store: ArtifactStore) -> bool:
    return not any(store.tmp_dir.iterdir())


def test_name_is_sha256_and_path_is_sharded(store):
    sha = store.put_bytes(b"abc")
    assert sha == ABC_SHA256
    assert store.path(sha) == store.root / "ba" / "78" / ABC_SHA256
    assert store.read_bytes(sha) == b"abc" and store.size(sha) == 3
    assert list(store.iter_shas()) == [sha]
    assert _staging_empty(store)


def test_streamed_chunks_hash_like_hashlib(store, rng):
    chunks = [rng.bytes(int(n)) for n in rng.integers(0, 5000, size=20)]
    staged = store.put_stream(chunks)
    assert staged.sha256 == hashlib.sha256(b"".join(chunks)).hexdigest()
    assert staged.size == sum(map(len, chunks))
    assert staged.path.parent == store.tmp_dir  # same file system as the final place
    store.commit(staged)
    assert not staged.path.exists() and store.verify(staged.sha256)


def test_size_cap_raises_and_leaves_nothing(store):
    with pytest.raises(TooLarge) as info:
        store.put_stream([b"x" * 600, b"y" * 600], max_bytes=1000)
    assert info.value.max_bytes == 1000 and isinstance(info.value, BadInput)
    assert _staging_empty(store) and list(store.iter_shas()) == []
    assert store.put_stream([b"x" * 1000], max_bytes=1000).size == 1000  # the cap is inclusive


def test_never_overwrites(store):
    sha = store.put_bytes(b"first")
    before = os.stat(store.path(sha))
    staged = store.put_stream([b"first"])
    assert store.commit(staged) == sha
    after = os.stat(store.path(sha))
    assert (before.st_ino, before.st_mtime_ns) == (after.st_ino, after.st_mtime_ns)
    assert _staging_empty(store)


def test_hash_check_detects_corruption(store):
    sha = store.put_array(np.arange(10.0))
    path = store.path(sha)
    os.chmod(path, 0o644)
    raw = bytearray(path.read_bytes())
    raw[-1] ^= 0xFF
    path.write_bytes(raw)
    assert not store.verify(sha)
    with pytest.raises(ArtifactCorrupt):
        store.get_array(sha)
    with pytest.raises(ArtifactCorrupt):
        store.read_bytes(sha)


def test_array_round_trip_and_no_object_arrays(store, rng):
    arr = rng.normal(size=(7, 5, 3))
    np.testing.assert_array_equal(store.get_array(store.put_array(arr)), arr)
    mask = rng.random((4, 4)) > 0.5
    np.testing.assert_array_equal(store.get_array(store.put_array(mask)), mask)
    with pytest.raises(BadInput, match="object"):
        store.put_array(np.array([{"a": 1}], dtype=object))


def test_disk_full_becomes_store_full(store, monkeypatch):
    stager = store.stage()

    class Full:
        def write(self, _chunk):
            raise OSError(errno.ENOSPC, "No space left on device")

        def close(self):
            pass

    stager._file.close()
    stager._file = Full()  # simulate ENOSPC from the file system
    with pytest.raises(StoreFull):
        stager.write(b"data")
    assert _staging_empty(store)


def test_stager_aborts_on_error_in_with_block(store):
    with pytest.raises(RuntimeError), store.stage() as stager:
        stager.write(b"partial")
        raise RuntimeError("client went away")
    assert _staging_empty(store)


def test_bad_names_are_refused(store):
    with pytest.raises(BadInput):
        store.path("../../etc/passwd")
    assert store.remove("0" * 64) is False

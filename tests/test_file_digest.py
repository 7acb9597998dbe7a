"""The sha256 of input files recorded in run.json.

Check value: sha256 of the three bytes "abc", the example of FIPS 180-2, Appendix B.1
(ba7816bf...f20015ad). A file larger than any read buffer checks that every byte counts.
"""

from __future__ import annotations

import hashlib

from lakeloss.io.run_record import sha256_of


def test_sha256_of_a_file_matches_the_published_example(tmp_path):
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    assert sha256_of(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_sha256_of_a_large_file_covers_every_byte(tmp_path):
    data = bytes(range(256)) * 20_000 + b"tail"  # ~5 MB, several read buffers
    path = tmp_path / "large.bin"
    path.write_bytes(data)
    assert sha256_of(path) == hashlib.sha256(data).hexdigest()
    path.write_bytes(data[:-1] + b"T")
    assert sha256_of(path) != hashlib.sha256(data).hexdigest()


def test_sha256_of_an_unreadable_path_is_none(tmp_path):
    assert sha256_of(tmp_path / "missing.nc") is None
    assert sha256_of(tmp_path) is None  # a directory

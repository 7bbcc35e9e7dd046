"""The one SHA-256 helper, against the FIPS 180-2 appendix B test vectors."""

from workbench.data.hashing import sha256_of


def test_sha256_of_matches_fips_180_2_vectors(tmp_path):
    # FIPS 180-2, appendix B.1 ("abc") and the empty message (NIST CSRC examples)
    abc = tmp_path / "abc"
    abc.write_bytes(b"abc")
    assert sha256_of(abc) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    empty = tmp_path / "empty"
    empty.write_bytes(b"")
    assert sha256_of(empty) == "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"


def test_sha256_of_reads_in_chunks_without_changing_the_digest(tmp_path):
    # FIPS 180-2 appendix B.3: one million 'a' characters
    f = tmp_path / "a"
    f.write_bytes(b"a" * 1_000_000)
    want = "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"
    assert sha256_of(f) == want
    assert sha256_of(f, chunk=4097) == want

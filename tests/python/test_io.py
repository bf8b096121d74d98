"""Matrix files: .npy/.npz round trips against numpy.save/numpy.load/numpy.savez, text files with
headers and comments, and every kind of bad input (ValueError for content, OSError for files)."""
import numpy as np
import pytest

import spinfer

INT_TYPES = ["i1", "i2", "i4", "i8", "u1", "u2", "u4", "u8"]
ALL_TYPES = ["?"] + INT_TYPES + ["f4", "f8"]


def random_bits(shape=(23, 7), seed=0):
    return (np.random.default_rng(seed).random(shape) < 0.4).astype(np.uint8)


@pytest.mark.parametrize("order", ["C", "F"])
@pytest.mark.parametrize("endian", ["<", ">"])
@pytest.mark.parametrize("code", ALL_TYPES)
def test_npy_binary_values_every_dtype(tmp_path, code, endian, order):
    bits = random_bits()
    dtype = np.dtype(code).newbyteorder(endian) if np.dtype(code).itemsize > 1 else np.dtype(code)
    arr = np.asarray(bits.astype(dtype), order=order)
    np.save(tmp_path / "x.npy", arr)
    X, names, convention = spinfer.read_matrix(tmp_path / "x.npy")
    assert X.dtype == np.uint8
    np.testing.assert_array_equal(X, bits)
    assert names == [] and convention == "binary"


@pytest.mark.parametrize("order", ["C", "F"])
@pytest.mark.parametrize("endian", ["<", ">"])
@pytest.mark.parametrize("code", ["i1", "i2", "i4", "i8", "f4", "f8"])
def test_npy_spin_values(tmp_path, code, endian, order):
    bits = random_bits(seed=1)
    dtype = np.dtype(code).newbyteorder(endian) if np.dtype(code).itemsize > 1 else np.dtype(code)
    np.save(tmp_path / "s.npy", np.asarray((2 * bits.astype(int) - 1).astype(dtype), order=order))
    r = spinfer.read_matrix(tmp_path / "s.npy")
    np.testing.assert_array_equal(r.X, bits)
    assert r.convention == "spin"


def test_write_npy_is_read_by_numpy(tmp_path):
    bits = random_bits()
    spinfer.write_matrix(tmp_path / "b.npy", bits)
    out = np.load(tmp_path / "b.npy")
    assert out.dtype == np.uint8
    np.testing.assert_array_equal(out, bits)
    spinfer.write_matrix(tmp_path / "s.npy", bits, convention="spin")
    out = np.load(tmp_path / "s.npy")
    assert out.dtype == np.int8
    np.testing.assert_array_equal(out, 2 * bits.astype(np.int8) - 1)
    # -1/+1 input keeps its convention by default
    spinfer.write_matrix(tmp_path / "t.npy", 2.0 * bits - 1)
    np.testing.assert_array_equal(np.load(tmp_path / "t.npy"), 2 * bits.astype(np.int8) - 1)


def test_npz_savez_and_savez_compressed(tmp_path):
    a, b = random_bits(seed=2), random_bits((5, 3), seed=3)
    for save in (np.savez, np.savez_compressed):
        path = tmp_path / f"{save.__name__}.npz"
        save(path, first=a, second=b.astype(np.float32))
        np.testing.assert_array_equal(spinfer.read_matrix(path, member="second").X, b)
        np.testing.assert_array_equal(spinfer.read_matrix(path, member="first.npy").X, a)
        with pytest.raises(ValueError, match=r"several arrays \(first, second\)"):
            spinfer.read_matrix(path)
        with pytest.raises(ValueError, match="no array named 'third'"):
            spinfer.read_matrix(path, member="third")
        single = tmp_path / f"single-{save.__name__}.npz"
        save(single, b)  # positional: arr_0
        np.testing.assert_array_equal(spinfer.read_matrix(single).X, b)


def test_npz_written_here_keeps_names_and_is_read_by_numpy(tmp_path):
    bits = random_bits((9, 3))
    names = ["unit 1", "ß-cell", "10"]
    spinfer.write_matrix(tmp_path / "m.npz", bits, names=names, convention="spin")
    with np.load(tmp_path / "m.npz") as z:
        assert sorted(z.files) == ["X", "names"]
        np.testing.assert_array_equal(z["X"], 2 * bits.astype(np.int8) - 1)
        assert list(z["names"]) == names
    r = spinfer.read_matrix(tmp_path / "m.npz")
    np.testing.assert_array_equal(r.X, bits)
    assert r.names == names and r.convention == "spin"


def test_csv_header_comments_and_pandas(tmp_path):
    pd = pytest.importorskip("pandas")
    p = tmp_path / "m.csv"
    p.write_text("# exported\nn1,n2,n3\n\n1,0,1\n# mid comment\n0,0,1\n")
    r = spinfer.read_matrix(p)
    np.testing.assert_array_equal(r.X, [[1, 0, 1], [0, 0, 1]])
    assert r.names == ["n1", "n2", "n3"]
    df = pd.DataFrame(random_bits((6, 3)), columns=["3", "1", "2"])
    spinfer.write_matrix(tmp_path / "d.tsv", df)
    back = pd.read_csv(tmp_path / "d.tsv", sep="\t")
    assert list(back.columns) == ["3", "1", "2"]
    np.testing.assert_array_equal(back.to_numpy(), df.to_numpy())
    r = spinfer.read_matrix(tmp_path / "d.tsv")
    assert r.names == ["3", "1", "2"]
    np.testing.assert_array_equal(r.X, df.to_numpy())


@pytest.mark.parametrize("value, message", [
    (2, r"row 2, column 3: value 2 is not binary"),
    (np.nan, r"row 2, column 3: value nan is not finite"),
    (np.inf, r"row 2, column 3: value inf is not finite"),
])
def test_npy_bad_values(tmp_path, value, message):
    arr = np.zeros((3, 4))
    arr[1, 2] = value
    np.save(tmp_path / "v.npy", arr)
    with pytest.raises(ValueError, match=message):
        spinfer.read_matrix(tmp_path / "v.npy")


def test_npy_mixed_conventions_and_stated_convention(tmp_path):
    np.save(tmp_path / "m.npy", np.array([[0, 1], [-1, 1]]))
    with pytest.raises(ValueError, match="mix 0 and -1"):
        spinfer.read_matrix(tmp_path / "m.npy")
    np.save(tmp_path / "s.npy", np.array([[-1, 1], [1, 1]]))
    with pytest.raises(ValueError, match="convention 'binary' was stated"):
        spinfer.read_matrix(tmp_path / "s.npy", convention="binary")


@pytest.mark.parametrize("shape", [(5,), (2, 2, 2), ()])
def test_npy_wrong_shape(tmp_path, shape):
    np.save(tmp_path / "w.npy", np.ones(shape, dtype=np.uint8))
    with pytest.raises(ValueError, match="expected a 2-D array"):
        spinfer.read_matrix(tmp_path / "w.npy")


@pytest.mark.parametrize("arr, message", [
    (np.array([[1, None]], dtype=object), "object arrays"),
    (np.array([["a", "b"]]), "string array"),
    (np.zeros((2, 2), dtype=[("a", "<i4"), ("b", "<f8")]), "structured"),
    (np.array([["2020-01-01"]], dtype="datetime64[D]"), "dates and times"),
    (np.zeros((2, 2), dtype=np.complex128), "complex"),
    (np.zeros((2, 2), dtype=np.float16), "float32 and float64"),
])
def test_npy_unsupported_dtypes(tmp_path, arr, message):
    np.save(tmp_path / "u.npy", arr, allow_pickle=True)
    with pytest.raises(ValueError, match=message):
        spinfer.read_matrix(tmp_path / "u.npy")


def test_npy_truncated_corrupt_empty(tmp_path):
    np.save(tmp_path / "ok.npy", random_bits())
    raw = (tmp_path / "ok.npy").read_bytes()
    (tmp_path / "trunc.npy").write_bytes(raw[:-5])
    with pytest.raises(ValueError, match="trunc.npy: truncated .npy data"):
        spinfer.read_matrix(tmp_path / "trunc.npy")
    (tmp_path / "head.npy").write_bytes(raw[:30])
    with pytest.raises(ValueError, match="truncated .npy header"):
        spinfer.read_matrix(tmp_path / "head.npy")
    (tmp_path / "corrupt.npy").write_bytes(raw.replace(b"'shape'", b"'shapx'"))
    with pytest.raises(ValueError, match="corrupt.npy: corrupt .npy header"):
        spinfer.read_matrix(tmp_path / "corrupt.npy")
    (tmp_path / "magic.npy").write_bytes(b"hello" + raw[5:])
    with pytest.raises(ValueError, match="bad magic"):
        spinfer.read_matrix(tmp_path / "magic.npy")
    (tmp_path / "empty.npy").write_bytes(b"")
    with pytest.raises(ValueError, match="empty.npy: empty file"):
        spinfer.read_matrix(tmp_path / "empty.npy")


def test_npz_empty_and_corrupt(tmp_path):
    (tmp_path / "empty.npz").write_bytes(b"")
    with pytest.raises(ValueError, match="empty file"):
        spinfer.read_matrix(tmp_path / "empty.npz")
    np.savez(tmp_path / "ok.npz", x=random_bits())
    raw = (tmp_path / "ok.npz").read_bytes()
    (tmp_path / "cut.npz").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(OSError, match="cut.npz: cannot read as an .npz"):
        spinfer.read_matrix(tmp_path / "cut.npz")


def test_missing_file_and_unknown_extension(tmp_path):
    with pytest.raises(OSError, match="no such file"):
        spinfer.read_matrix(tmp_path / "nope.npy")
    with pytest.raises(OSError, match="no such file"):
        spinfer.read_matrix(tmp_path / "nope.npz")
    (tmp_path / "x.h5").write_bytes(b"1")
    with pytest.raises(ValueError, match="unknown file type"):
        spinfer.read_matrix(tmp_path / "x.h5")


@pytest.mark.parametrize("text, message", [
    ("a,b\n0,1\n1\n", r"line 3: 1 cells, expected 2"),
    ("0,1\n1,x\n", r"line 2, column 2: 'x' is not a number"),
    ("0,1\n1,NaN\n", r"line 2, column 2: value NaN is not finite"),
    ("0,1\n1,2\n", r"line 2, column 2: value 2 is not binary"),
    ("a,b,a\n0,1,1\n", r"line 1, column 3: duplicate column name 'a'"),
    ("", r"empty file"),
    ("# nothing\n\n", r"empty file"),
])
def test_csv_bad_input(tmp_path, text, message):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(ValueError, match=message):
        spinfer.read_matrix(p)


def test_failed_write_leaves_no_file(tmp_path):
    with pytest.raises(ValueError):
        spinfer.write_matrix(tmp_path / "x.npy", np.array([[0, 2]]))
    with pytest.raises(ValueError, match="unknown file type"):
        spinfer.write_matrix(tmp_path / "x.bin", random_bits())
    with pytest.raises(OSError):
        spinfer.write_matrix(tmp_path / "no-such-dir" / "x.npy", random_bits())
    assert list(tmp_path.iterdir()) == []


def test_mutated_npy_and_npz_never_crash(tmp_path):
    # Random byte flips and cuts (fixed seed) must give a clean ValueError/OSError or a valid read.
    rng = np.random.default_rng(5)
    np.save(tmp_path / "ok.npy", random_bits((6, 4)))
    np.savez_compressed(tmp_path / "ok.npz", x=random_bits((6, 4)))
    for name in ("ok.npy", "ok.npz"):
        raw = bytearray((tmp_path / name).read_bytes())
        for trial in range(150):
            b = bytearray(raw)
            for _ in range(rng.integers(1, 4)):
                b[rng.integers(len(b))] = rng.integers(256)
            if trial % 3 == 0:
                b = b[: rng.integers(len(b))]
            p = tmp_path / ("m" + name[-4:])
            p.write_bytes(bytes(b))
            try:
                r = spinfer.read_matrix(p)
                assert r.X.ndim == 2
            except (ValueError, OSError):
                pass

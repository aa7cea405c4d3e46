"""Mutations of the files gridlu reads, for the fuzz test (test_fuzz.py).

Every mutation takes a random generator and a path, changes the file (or directory) in
place and returns a Mutation saying what it did. The choices come only from the generator,
so a seed and a case number give the same file again.

The mutations know nothing of which fields gridlu needs: they walk whatever the file
holds (attributes, datasets, JSON keys, the files of a directory), so the same code
covers formats that change.
"""

import json
import os
import shutil
from dataclasses import dataclass, field

import h5py
import numpy as np

# A file gridlu must refuse (a truncated HDF5 file, pivots out of range, ...) is marked
# `refuse`; anything else may also leave a file gridlu can use (`any`).
REFUSE, ANY = "refuse", "any"


@dataclass
class Mutation:
    family: str
    detail: str
    expect: str = ANY
    # Some edits change what the job asks rather than damage the data: a usage refusal
    # (exit 2: output exists, orientation differs) is then an honest answer.
    usage_ok: bool = False
    # Values edited in place can make a system singular (exit 4).
    singular_ok: bool = False
    # A header claiming an enormous matrix may be refused for want of memory (exit 6).
    memory_ok: bool = False
    # A file that only stands for a resource (a directory's lock) may be unusable as one.
    resource_ok: bool = False
    notes: list = field(default_factory=list)


class NotApplicable(Exception):
    """The chosen mutation has nothing to act on in this file; another is drawn."""


# --- gridlu's content checksum, to keep a checksum consistent with edited data -----------

MASK = np.uint64(0xFFFFFFFFFFFFFFFF)


def _mix64(z):
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def content_checksum(values):
    """The XOR over entries (i, j) of the hash gridlu gives a value at (i, j): a 1-D array is
    a column (j = 0). Works on the values as numpy holds them, which for the types gridlu
    stores (float32/64, complex of those, int64) is the layout gridlu hashes."""
    a = np.ascontiguousarray(values)
    if a.size == 0:
        return 0
    if a.ndim == 1:
        a = a.reshape(-1, 1)
    rows, cols = a.shape
    i = np.repeat(np.arange(rows, dtype=np.uint64), cols)
    j = np.tile(np.arange(cols, dtype=np.uint64), rows)
    with np.errstate(over="ignore"):
        h = _mix64((i * np.uint64(0x9E3779B97F4A7C15)) ^ _mix64(j))
        words = a.reshape(rows * cols).view(np.uint32).reshape(rows * cols, -1)
        for w in range(words.shape[1]):
            h = _mix64(h ^ words[:, w].astype(np.uint64))
    return int(np.bitwise_xor.reduce(h)) if h.size else 0


def checksum_text(value):
    return f"0x{value:016x}"


def recompute_checksums(f):
    """Sets every root attribute NAME_checksum whose dataset NAME is there to that dataset's
    content checksum, as if whoever edited the data had also fixed the checksums; returns
    the names fixed."""
    fixed = []
    for key in list(f.attrs):
        if not key.endswith("_checksum"):
            continue
        stem = key[: -len("_checksum")]
        obj = f.get(stem)
        if not isinstance(obj, h5py.Dataset) or obj.dtype.kind not in "fciu" or obj.ndim > 2:
            continue
        f.attrs[key] = checksum_text(content_checksum(obj[()]))
        fixed.append(key)
    return fixed


# --- helpers -------------------------------------------------------------------------------

def pick(rng, seq):
    seq = list(seq)
    if not seq:
        raise NotApplicable
    return seq[int(rng.integers(len(seq)))]


def weighted(rng, table):
    """One item of [(weight, item), ...]."""
    weights = np.array([w for w, _ in table], dtype=float)
    return table[int(rng.choice(len(table), p=weights / weights.sum()))][1]


def objects(f):
    """'/' and every dataset and group below it, by name."""
    found = ["/"]
    f.visit(lambda name: found.append("/" + name))
    return found


def datasets(f):
    return [name for name in objects(f) if isinstance(f[name], h5py.Dataset)]


def attribute_owners(f):
    return [name for name in objects(f) if len(f[name].attrs)]


def extreme_values(n):
    """Numbers that break assumptions about sizes and counts of an order-n matrix."""
    return [0, -1, 1, n - 1, n + 1, 2 * n, 2**31, 2**62, -(2**63), 2**63 - 1]


def copy_dataset(f, name, data, **options):
    """Replaces dataset `name` by `data` (keeping its attributes)."""
    attrs = {k: v for k, v in f[name].attrs.items()} if name in f else {}
    if name in f:
        del f[name]
    d = f.create_dataset(name, data=data, **options)
    for k, v in attrs.items():
        d.attrs[k] = v
    return d


# --- HDF5 mutations ----------------------------------------------------------------------

def attr_delete(rng, f, ctx):
    owner = pick(rng, attribute_owners(f))
    key = pick(rng, f[owner].attrs)
    del f[owner].attrs[key]
    return Mutation("attr-delete", f"{owner}:{key}")


def attr_rename(rng, f, ctx):
    owner = pick(rng, attribute_owners(f))
    key = pick(rng, f[owner].attrs)
    value = f[owner].attrs[key]
    del f[owner].attrs[key]
    new = pick(rng, [key.upper(), key + "_", " " + key, key[:-1] or "x"])
    f[owner].attrs[new] = value
    return Mutation("attr-rename", f"{owner}:{key} -> {new!r}")


def attr_retype(rng, f, ctx):
    """The same attribute with another type: int <-> float <-> string <-> array, empty
    (null dataspace), compound, boolean, fixed-length string."""
    owner = pick(rng, attribute_owners(f))
    key = pick(rng, f[owner].attrs)
    old = f[owner].attrs[key]
    scalar = old.item() if isinstance(old, np.ndarray) and old.size == 1 else old
    text = scalar.decode(errors="replace") if isinstance(scalar, bytes) else str(scalar)
    try:
        number = float(scalar)
    except (TypeError, ValueError):
        number = 7.5
    choices = {
        "int": lambda: np.int64(int(number) if np.isfinite(number) else 3),
        "float": lambda: np.float64(number + 0.5),
        "string": lambda: text if not isinstance(scalar, str) else text + "x",
        "fixed-string": lambda: np.bytes_(text.encode()),
        "int32": lambda: np.int32(int(number) % 2**31 if np.isfinite(number) else 1),
        "uint64": lambda: np.uint64(2**64 - 1),
        "array": lambda: np.array([number, number]),
        "1-element array": lambda: np.array([int(number) if np.isfinite(number) else 1]),
        "string array": lambda: np.array([text.encode(), b"x"]),
        "empty float": lambda: h5py.Empty("f8"),
        "empty int": lambda: h5py.Empty("i8"),
        "empty array": lambda: np.zeros(0),
        "2-D array": lambda: np.ones((2, 3)),
        "compound": lambda: np.array((1.0, 2.0), dtype=[("r", "f8"), ("i", "f8")]),
        "bool": lambda: np.bool_(True),
        "complex": lambda: np.complex128(number + 1j),
    }
    name = pick(rng, sorted(choices))
    value = choices[name]()
    del f[owner].attrs[key]
    f[owner].attrs[key] = value
    return Mutation("attr-retype", f"{owner}:{key} ({type(scalar).__name__}) -> {name}")


def attr_extreme(rng, f, ctx):
    owner = pick(rng, attribute_owners(f))
    key = pick(rng, f[owner].attrs)
    old = f[owner].attrs[key]
    n = ctx.get("n", 10)
    kind = np.asarray(old).dtype.kind
    if kind in "iu":
        value = np.int64(pick(rng, extreme_values(n)))
    elif kind == "f":
        value = np.float64(pick(rng, [np.nan, np.inf, -np.inf, -1.0, 0.0, 1e308, 5e-324,
                                      float(n + 1)]))
    else:
        value = pick(rng, ["", "x" * 1_000_000, "0x", "0xzzzzzzzzzzzzzzzz", "0x" + "f" * 17,
                           "-1", "nan", "\u00e9\u0000tail", "../../etc/passwd", "/",
                           "float64 ", "complex256", "checkpoint\n", str(2**70)])
    del f[owner].attrs[key]
    f[owner].attrs[key] = value
    shown = value if not isinstance(value, str) or len(value) < 40 else f"{len(value)} chars"
    return Mutation("attr-extreme", f"{owner}:{key} = {shown!r}")


def ds_delete(rng, f, ctx):
    name = pick(rng, datasets(f))
    del f[name]
    return Mutation("ds-delete", name, expect=REFUSE if name in ctx.get("needed", ()) else ANY)


def ds_rename(rng, f, ctx):
    name = pick(rng, datasets(f))
    other_case = name.lower() if name.lower() != name else name.upper()
    new = pick(rng, [other_case, name + "_", name + "/x"])
    if new.endswith("/x"):
        f.move(name, name + "_tmp")
        f.create_group(name)
        f.move(name + "_tmp", new)
    else:
        f.move(name, new)
    return Mutation("ds-rename", f"{name} -> {new}",
                    expect=REFUSE if name in ctx.get("needed", ()) else ANY)


def ds_replace(rng, f, ctx):
    """The dataset's name now leads to something that is not a usable dataset."""
    name = pick(rng, datasets(f))
    what = pick(rng, ["group", "soft link to itself", "dangling soft link", "external link",
                      "hard link to another dataset"])
    others = [d for d in datasets(f) if d != name]
    if what == "hard link to another dataset" and not others:
        what = "group"
    del f[name]
    if what == "group":
        f.create_group(name)
    elif what == "soft link to itself":
        f[name] = h5py.SoftLink(name)
    elif what == "dangling soft link":
        f[name] = h5py.SoftLink("/nowhere")
    elif what == "external link":
        f[name] = h5py.ExternalLink("/nonexistent/file.h5", "/A")
    else:
        f[name] = f[pick(rng, others)]
    return Mutation("ds-replace", f"{name} -> {what}",
                    expect=REFUSE if name in ctx.get("needed", ()) and what != "hard link to "
                    "another dataset" else ANY)


def ds_reshape(rng, f, ctx):
    """Same type, other dimensions: off by one, transposed, empty, 3-D, scalar, enormous
    (chunked, so the file stays small)."""
    name = pick(rng, datasets(f))
    d = f[name]
    shape, dtype = d.shape, d.dtype
    n = ctx.get("n", 10)
    r0 = shape[0] if shape else n
    choices = [(r0 + 1,) + shape[1:], (max(r0 - 1, 0),) + shape[1:], shape[::-1],
               (0,) * max(len(shape), 1), (r0,), (r0, 1), (r0, 2), (1,) + shape, shape + (1,),
               (r0, r0, 2), (), (2**40,), (2**31, 2**31), (2**24, 2**24)]
    new = choices[int(rng.integers(len(choices)))]
    if new == shape:
        new = (r0 + 3,) + shape[1:]
    huge = any(s >= 2**24 for s in new)
    old = d[()] if d.size else np.zeros(0, dtype)
    del f[name]
    if huge:
        f.create_dataset(name, shape=new, dtype=dtype, chunks=(64,) * len(new))
    elif new == ():
        f.create_dataset(name, data=old.reshape(-1)[0] if old.size else np.zeros((), dtype))
    else:
        flat = np.resize(old.reshape(-1) if old.size else np.zeros(1, dtype), int(np.prod(new)))
        f.create_dataset(name, data=flat.reshape(new))
    # Any other shape of a square matrix is wrong; B may take other valid shapes.
    return Mutation("ds-reshape", f"{name} {shape} -> {new}", memory_ok=huge,
                    expect=REFUSE if name in ctx.get("square", ()) else ANY)


def huge_system(rng, f, ctx):
    """A and B of one enormous order, consistent with each other, in a file of a few
    kilobytes (chunked, nothing stored): only the memory they would take can refuse them."""
    if "A" not in f or "B" not in f:
        raise NotApplicable
    n = pick(rng, [2**20, 2**24, 2**31])
    for name, shape in (("A", (n, n)), ("B", (n,) + f["B"].shape[1:])):
        dtype = f[name].dtype
        del f[name]
        f.create_dataset(name, shape=shape, dtype=dtype, chunks=tuple(min(64, s) for s in shape))
    return Mutation("huge-system", f"A {n} x {n}, B to match", expect=REFUSE, memory_ok=True)


def ds_dtype(rng, f, ctx):
    """Same shape, another element type."""
    name = pick(rng, datasets(f))
    d = f[name]
    data = d[()]
    real = np.real(data) if data.dtype.kind == "c" else data
    choices = {
        "int32": lambda: np.asarray(real).astype(np.int32),
        "int64": lambda: np.asarray(real).astype(np.int64),
        "uint8": lambda: np.asarray(real).astype(np.uint8),
        "float16": lambda: np.asarray(real).astype(np.float16),
        "float32": lambda: np.asarray(real).astype(np.float32),
        "float64 big-endian": lambda: np.asarray(real).astype(">f8"),
        "int64 big-endian": lambda: np.asarray(real).astype(">i8"),
        "string": lambda: np.asarray(real).astype("S8"),
        "bool": lambda: np.asarray(real).astype(bool),
        "complex {r,i} of int32": lambda: _compound(real, [("r", "<i4"), ("i", "<i4")]),
        "complex {r,i} of float16": lambda: _compound(real, [("r", "<f2"), ("i", "<f2")]),
        "compound {re,im}": lambda: _compound(real, [("re", "<f8"), ("im", "<f8")]),
        "compound {i,r}": lambda: _compound(real, [("i", "<f8"), ("r", "<f8")]),
        "compound {r,i,j}": lambda: _compound(real, [("r", "<f8"), ("i", "<f8"), ("j", "<f8")]),
        "compound {r}": lambda: _compound(real, [("r", "<f8")]),
        "compound {r: f4, i: f8}": lambda: _compound(real, [("r", "<f4"), ("i", "<f8")]),
        "complex128": lambda: np.asarray(real).astype(np.complex128),
        "complex64": lambda: np.asarray(real).astype(np.complex64),
    }
    choice = pick(rng, sorted(choices))
    with np.errstate(all="ignore"):
        new = choices[choice]()
    copy_dataset(f, name, new)
    return Mutation("ds-dtype", f"{name} {data.dtype} -> {choice}")


def _compound(real, fields):
    out = np.zeros(np.shape(real), dtype=fields)
    with np.errstate(all="ignore"):
        for k, (member, _) in enumerate(fields):
            out[member] = np.asarray(real) * (1 if k == 0 else 0.5)
    return out


def ds_values(rng, f, ctx):
    """Numbers in place: NaN, Inf, zeros, huge; checksums left as they were or recomputed."""
    numeric = [n for n in datasets(f) if f[n].dtype.kind in "fc" and f[n].size]
    name = pick(rng, numeric)
    d = f[name]
    data = d[()]
    flat = data.reshape(-1)
    what = pick(rng, ["NaN", "Inf", "zero row", "all zero", "1e308", "denormal", "one ulp"])
    k = int(rng.integers(flat.size))
    if what == "NaN":
        flat[k] = np.nan
    elif what == "Inf":
        flat[k] = -np.inf
    elif what == "zero row":
        data[int(rng.integers(data.shape[0]))] = 0
    elif what == "all zero":
        data[...] = 0
    elif what == "1e308":
        flat[k] = np.finfo(data.real.dtype).max
    elif what == "denormal":
        flat[k] = np.finfo(data.real.dtype).tiny / 4
    else:
        imag = flat[k].imag * 1j if data.dtype.kind == "c" else 0
        flat[k] = np.nextafter(flat[k].real, np.inf) + imag
    d[...] = data
    recompute = bool(rng.integers(2))
    fixed = recompute_checksums(f) if recompute else []
    return Mutation("ds-values", f"{name}: {what} at {k}"
                    + (f", recomputed {fixed}" if fixed else ", checksums left"),
                    singular_ok=True)


def pivots(rng, f, ctx):
    """Pivot indices out of range, negative, of the wrong length, or plausible but wrong;
    checksums left as they were or recomputed to match."""
    name = pick(rng, [n for n in datasets(f) if "pivot" in n.lower()])
    p = f[name][()].astype(np.int64)
    n = ctx.get("n", len(p))
    what = pick(rng, ["= n", "= -1", "= 2**62", "= -2**63", "< i", "length + 1", "length - 1",
                      "empty", "length 2n", "swapped two (in range)", "all identity",
                      "int32", "2-D"])
    out, expect = p.copy(), REFUSE
    if len(p) == 0 and what in ("= n", "= -1", "= 2**62", "= -2**63", "< i",
                                "swapped two (in range)"):
        what = "length + 1"
    k = int(rng.integers(max(len(p), 1)))
    if what == "= n":
        out[k] = n
    elif what == "= -1":
        out[k] = -1
    elif what == "= 2**62":
        out[k] = 2**62
    elif what == "= -2**63":
        out[k] = -(2**63)
    elif what == "< i":
        k = max(k, 1) if len(p) > 1 else k
        out[k] = k - 1
    elif what == "length + 1":
        out = np.append(p, min(len(p), n - 1))
    elif what == "length - 1":
        out = p[:-1]
    elif what == "empty":
        out = p[:0]
        expect = REFUSE if len(p) else ANY
    elif what == "length 2n":
        out = np.concatenate([p, p])
    elif what == "swapped two (in range)":
        j = int(rng.integers(k, n))  # still a valid pivot for step k: the data are wrong
        out[k] = j
        expect = ANY
    elif what == "all identity":
        out = np.arange(len(p), dtype=np.int64)
        expect = ANY
    elif what == "int32":
        out = p.astype(np.int32)
        expect = ANY
    else:
        out = p.reshape(-1, 1)
        expect = ANY
    copy_dataset(f, name, out)
    recompute = bool(rng.integers(2))
    fixed = recompute_checksums(f) if recompute else []
    return Mutation("pivots", f"{name}[{k}] {what}" + (f", recomputed {fixed}" if fixed else
                                                        ", checksums left"), expect=expect)


def ds_layout(rng, f, ctx):
    """The same values stored another way HDF5 allows (chunked, compressed, compact):
    a reader through HDF5 must not care."""
    name = pick(rng, [n for n in datasets(f) if f[n].ndim >= 1 and f[n].size])
    data = f[name][()]
    how = pick(rng, ["chunked", "gzip", "shuffle+gzip", "chunked 1 row", "resizable"])
    if how == "chunked":
        copy_dataset(f, name, data, chunks=True)
    elif how == "gzip":
        copy_dataset(f, name, data, compression="gzip")
    elif how == "shuffle+gzip":
        copy_dataset(f, name, data, compression="gzip", shuffle=True)
    elif how == "chunked 1 row":
        copy_dataset(f, name, data, chunks=(1,) + data.shape[1:])
    else:
        copy_dataset(f, name, data, chunks=True, maxshape=(None,) * data.ndim)
    return Mutation("ds-layout", f"{name} -> {how}")


H5_MUTATIONS = [
    (3, attr_delete), (2, attr_rename), (4, attr_retype), (4, attr_extreme), (2, ds_delete),
    (1, ds_rename), (2, ds_replace), (4, ds_reshape), (4, ds_dtype), (3, ds_values),
    (4, pivots), (1, ds_layout), (1, huge_system),
]


def mutate_h5(rng, path, ctx):
    """One structural mutation through h5py; NotApplicable when none fits this file."""
    for _ in range(8):
        fn = weighted(rng, H5_MUTATIONS)
        try:
            with h5py.File(path, "r+") as f:
                m = fn(rng, f, ctx)
        except NotApplicable:
            continue
        if fn in (attr_extreme, attr_retype, attr_delete, attr_rename) and \
                "column_major" in m.detail:
            m.usage_ok = True  # the orientation of saved factors is the user's choice
        return m
    raise NotApplicable


# --- raw bytes -----------------------------------------------------------------------------

def raw_truncate(rng, path, ctx):
    size = os.path.getsize(path)
    cut = int(rng.integers(0, size)) if size else 0
    os.truncate(path, cut)
    return Mutation("raw-truncate", f"to {cut} of {size} bytes", expect=REFUSE)


def raw_superblock(rng, path, ctx):
    data = bytearray(open(path, "rb").read())
    end = min(len(data), 96)
    if not end:
        raise NotApplicable
    where = sorted({int(x) for x in rng.integers(0, end, int(rng.integers(1, 4)))})
    for w in where:
        data[w] ^= int(rng.integers(1, 256))
    open(path, "wb").write(data)
    return Mutation("raw-superblock", f"bytes {where} flipped")


def raw_flip(rng, path, ctx):
    data = bytearray(open(path, "rb").read())
    if not data:
        raise NotApplicable
    where = sorted({int(x) for x in rng.integers(0, len(data), int(rng.integers(1, 9)))})
    for w in where:
        data[w] ^= int(rng.integers(1, 256))
    open(path, "wb").write(data)
    return Mutation("raw-flip", f"bytes {where[:8]} of {len(data)} flipped", singular_ok=True)


def raw_zero(rng, path, ctx):
    data = bytearray(open(path, "rb").read())
    if not data:
        raise NotApplicable
    start = int(rng.integers(0, len(data)))
    length = int(rng.integers(1, 4096))
    data[start:start + length] = bytes(len(data[start:start + length]))
    open(path, "wb").write(data)
    return Mutation("raw-zero", f"bytes [{start}, {start + length}) zeroed", singular_ok=True)


def raw_append(rng, path, ctx):
    with open(path, "ab") as out:
        out.write(rng.bytes(int(rng.integers(1, 5000))))
    return Mutation("raw-append", "random bytes appended")


def raw_replace(rng, path, ctx):
    what = pick(rng, ["empty", "text", "random", "JSON"])
    content = {"empty": b"", "text": b"1 2\n3 4\n" * 100, "random": rng.bytes(4096),
               "JSON": b'{"gridlu_kind": "checkpoint"}\n'}[what]
    open(path, "wb").write(content)
    return Mutation("raw-replace", f"whole file -> {what}", expect=REFUSE)


RAW_MUTATIONS = [(3, raw_truncate), (2, raw_superblock), (3, raw_flip), (1, raw_zero),
                 (1, raw_append), (1, raw_replace)]


def mutate_raw(rng, path, ctx):
    for _ in range(8):
        try:
            return weighted(rng, RAW_MUTATIONS)(rng, path, ctx)
        except NotApplicable:
            continue
    raise NotApplicable


# --- JSON ----------------------------------------------------------------------------------

def _paths(value, prefix=()):
    """Every key path and list index path in a JSON value."""
    out = []
    if isinstance(value, dict):
        for k, v in value.items():
            out.append(prefix + (k,))
            out += _paths(v, prefix + (k,))
    elif isinstance(value, list):
        for k, v in enumerate(value):
            out.append(prefix + (k,))
            out += _paths(v, prefix + (k,))
    return out


def _parent(doc, path):
    for k in path[:-1]:
        doc = doc[k]
    return doc


def mutate_json(rng, path, ctx):
    text = open(path, "rb").read()
    try:
        doc = json.loads(text)
    except ValueError:
        doc = None
    paths = _paths(doc) if doc is not None else []
    table = [(1, "invalid"), (1, "empty"), (1, "top-level"), (1, "deep nesting")]
    if paths:
        table += [(4, "delete key"), (5, "retype value"), (1, "rename key"), (1, "extra key")]
    what = weighted(rng, table)
    expect, usage_ok = ANY, True
    if what == "invalid":
        cut = int(rng.integers(0, max(len(text) - 1, 1)))
        out = text[:cut] + pick(rng, [b"", b"}", b",", b"\x00", b"\xff\xfe"])
        detail = f"cut at byte {cut} of {len(text)}"
        expect = REFUSE
    elif what == "empty":
        out, detail, expect = b"", "empty file", REFUSE
    elif what == "top-level":
        value = pick(rng, [[], [doc], 0, "text", None, True])
        out, detail, expect = json.dumps(value).encode(), f"top level -> {value!r:.40}", REFUSE
    elif what == "deep nesting":
        depth = 100_000
        out = b"[" * depth + b"]" * depth
        detail, expect = f"arrays nested {depth} deep", REFUSE
    else:
        key_path = pick(rng, paths)
        parent = _parent(doc, key_path)
        key = key_path[-1]
        if what == "delete key":
            del parent[key]
            detail = f"deleted {'.'.join(map(str, key_path))}"
        elif what == "rename key" and isinstance(parent, dict):
            parent[str(key) + "_"] = parent.pop(key)
            detail = f"renamed {'.'.join(map(str, key_path))}"
        elif what == "extra key" and isinstance(parent, dict):
            parent["zz_unknown"] = {"x": [1, 2]}
            detail = "added an unknown key"
        else:
            old = parent[key]
            n = ctx.get("n", 10)
            new = pick(rng, [0, -1, 2**62, 2**64, -(2**63) - 1, 1.5, 1e308, -0.0, "", "x" * 100_000,
                             None, True, [], {}, [old], {"v": old}, str(old), n + 1,
                             "/nonexistent/dir/x.h5", "../x.h5"])
            if new == old and type(new) is type(old):
                new = None
            parent[key] = new
            detail = f"{'.'.join(map(str, key_path))}: {old!r:.40} -> {new!r:.40}"
            what = "retype value"
        out = json.dumps(doc).encode()
    open(path, "wb").write(out)
    return Mutation("json-" + what.replace(" ", "-"), detail, expect=expect, usage_ok=usage_ok)


# --- whole files of a directory ------------------------------------------------------------

def mutate_entry(rng, directory, name, ctx):
    """The file `name` of a checkpoint directory: gone, a directory, or empty."""
    path = os.path.join(directory, name)
    what = pick(rng, ["delete", "directory", "empty"])
    if what == "delete":
        os.remove(path)
    elif what == "directory":
        os.remove(path)
        os.mkdir(path)
    else:
        open(path, "wb").close()
    return Mutation("dir-" + what, name, usage_ok=True)


def mutate_directory(rng, directory, ctx):
    """One mutation of whatever a checkpoint directory holds: its HDF5 files through h5py
    or as bytes, its JSON files as JSON or as bytes, or a file as a whole."""
    names = sorted(e.name for e in os.scandir(directory) if e.is_file())
    if not names:
        raise NotApplicable
    for _ in range(8):
        name = pick(rng, names)
        path = os.path.join(directory, name)
        is_h5 = h5py.is_hdf5(path)
        is_json = name.endswith(".json")
        table = [(1, "entry")]
        if is_h5:
            table += [(6, "h5"), (3, "raw")]
        elif is_json:
            table += [(6, "json"), (1, "raw")]
        else:
            table += [(1, "raw")]
        how = weighted(rng, table)
        try:
            if how == "entry":
                m = mutate_entry(rng, directory, name, ctx)
            elif how == "h5":
                m = mutate_h5(rng, path, ctx)
            elif how == "json":
                m = mutate_json(rng, path, ctx)
            else:
                m = mutate_raw(rng, path, ctx)
        except NotApplicable:
            continue
        m.detail = f"{name}: {m.detail}"
        # A job file that cannot be read may leave gridlu with another job's view of the
        # directory (its output exists, say): a usage refusal is then honest.
        m.usage_ok = m.usage_ok or is_json
        if not is_h5 and not is_json:
            # Neither data nor job (a lock): its bytes mean nothing, its kind may matter.
            m.expect, m.resource_ok = ANY, True
        return m
    raise NotApplicable


def copy_tree(src, dst):
    shutil.copytree(src, dst, symlinks=True)

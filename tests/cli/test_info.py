"""gridlu info against h5py: every dataset h5py sees in a file must be listed with its shape
and type, and the kind of the file must be told right."""

import re
import sys
from pathlib import Path

import h5py
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import harness  # noqa: E402
from harness import random_matrix, write_h5  # noqa: E402

suite = harness.Suite(__doc__)
rng = np.random.default_rng(7031)


def parse(stdout):
    """The listing as {"file": str, "kind": str, "attributes": {name: value},
    "datasets": {path: (shape, type)}}; fields are separated by two or more spaces."""
    info = {"file": None, "kind": None, "attributes": {}, "datasets": {}}
    for line in stdout.splitlines():
        word, _, rest = line.partition(" ")
        rest = rest.strip()
        if word in ("file", "kind"):
            info[word] = rest
        elif word == "attribute":
            name, _, value = rest.partition(" = ")
            info["attributes"][name.strip()] = value.strip()
        elif word == "dataset":
            fields = re.split(r"\s{2,}", rest)
            if len(fields) == 3:
                shape = tuple(int(v) for v in fields[1].split(" x "))
                info["datasets"][fields[0]] = (shape, fields[2])
            else:
                info["datasets"][rest] = (None, None)
    return info


def h5py_view(path):
    """{path: (shape, expected type word or None if h5py has no plain name for it)}."""
    found = {}

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            dt = obj.dtype
            word = ("string" if h5py.check_string_dtype(dt) else
                    dt.name if dt.kind in "iufc" else None)
            found["/" + name] = (obj.shape, word)

    with h5py.File(path, "r") as f:
        f.visititems(visit)
    return found


def check_size(c, file_line, path):
    """The size in the file line, read with a decimal or a binary unit, matches the file to
    within the rounding of the digits shown (and 5 % for the 1000 / 1024 ambiguity)."""
    m = re.search(r"\(([\d.]+)\s*(B|[kKMGT]i?B)\)", file_line or "")
    if not c.check(m, f"no size in the file line {file_line!r}"):
        return
    digits, unit = m.group(1), m.group(2)
    decimals = len(digits.partition(".")[2])
    size = path.stat().st_size
    power = " KMGT".index(unit[0].upper()) if unit != "B" else 0
    c.check(any(abs(float(digits) * base**power - size) <=
                0.05 * size + 0.5 * 10**-decimals * base**power for base in (1000, 1024)),
            f"file line says {m.group(0)}, the file has {size} bytes")


def check_listing(c, path, kind):
    """Run info on `path`: exit 0, the kind line starts with `kind`, every dataset h5py
    sees is listed with its shape and type, and nothing else; returns the parsed listing.
    A remark in parentheses may follow the type of a dataset in a foreign file; in a file
    gridlu wrote, every dataset is gridlu's own and needs none."""
    remark = r"( \(.*\))?" if kind.startswith("foreign") else ""
    run = suite.run("info", path)
    c.succeeded(run)
    info = parse(run.stdout)
    c.check(info["file"] and path.name in info["file"], f"file line {info['file']!r}")
    check_size(c, info["file"], path)
    c.check(info["kind"] and info["kind"].startswith(kind),
            f"kind line {info['kind']!r} should start with {kind!r}")
    expected = h5py_view(path)
    c.check(set(info["datasets"]) == set(expected),
            f"datasets listed {sorted(info['datasets'])}, h5py sees {sorted(expected)}")
    for name, (shape, word) in expected.items():
        if name not in info["datasets"]:
            continue
        got_shape, got_type = info["datasets"][name]
        c.check(got_shape == shape, f"{name}: shape {got_shape}, h5py says {shape}")
        if word is None:
            c.check(got_type, f"{name}: no type listed")
        else:
            c.check(got_type and re.fullmatch(re.escape(word) + remark, got_type),
                    f"{name}: type {got_type!r}, h5py says {word}")
    return info


def check_gridlu_kind(c, info, word):
    value = info["attributes"].get("gridlu_kind")
    c.check(value == word, f"attribute gridlu_kind = {value!r}, expected {word!r}")


# Big enough (about 1.3 MB) for the size shown to be checked to a few percent.
for dtype in ("float64", "complex64"):
    with suite.case(f"info on a generated {dtype} system") as c:
        path = c.dir / "system.h5"
        c.succeeded(suite.run("generate", "random", "--n", 400, "--rhs", 2, "--type", dtype,
                              "--out", path, ranks=2))
        info = check_listing(c, path, "gridlu system")
        check_gridlu_kind(c, info, "system")
        # The kind line carries the format version of the file.
        c.check(re.search(r"format \d+", info["kind"] or ""), f"no format in {info['kind']!r}")

with suite.case("info on solve's output and on --save-factors' file") as c:
    system, x, factors = c.dir / "system.h5", c.dir / "x.h5", c.dir / "factors.h5"
    c.succeeded(suite.run("generate", "random", "--n", 70, "--rhs", 3, "--type", "complex128",
                          "--out", system, ranks=2))
    c.succeeded(suite.run("solve", system, "--out", x, "--save-factors", factors, ranks=2))
    check_gridlu_kind(c, check_listing(c, x, "gridlu solution"), "solution")
    check_gridlu_kind(c, check_listing(c, factors, "gridlu factors"), "factors")

with suite.case("info on a foreign file: groups, ints, strings, attributes") as c:
    path = c.dir / "plate_model.h5"
    with h5py.File(path, "w") as f:
        f.attrs["origin"] = "charged plate, 96 panels"
        f.attrs["panels"] = np.int32(96)
        mesh = f.create_group("plate/mesh")
        mesh.attrs["units"] = "metre"
        mesh["nodes"] = rng.uniform(0, 1, (96, 3))
        mesh["ids"] = np.arange(96, dtype=np.int32)
        f["plate/labels"] = np.array(["edge", "corner", "face", "hole"], dtype=h5py.string_dtype())
        f["plate/field"] = rng.uniform(0, 1, (4, 5, 6)).astype(np.float32)
        f["charges"] = random_matrix(rng, (96,), np.complex128)
        f.create_group("empty")
    info = check_listing(c, path, "foreign (not written by gridlu)")
    attrs = info["attributes"]
    c.check(attrs.get("origin") == "charged plate, 96 panels", f"origin attribute: {attrs}")
    c.check(attrs.get("panels") == "96", f"panels attribute: {attrs}")
    # Attributes of other objects as info shows those of a dataset: /path:name = value
    c.check(attrs.get("/plate/mesh:units") == "metre", f"group attribute units: {attrs}")

with suite.case("info on a system written by h5py: foreign, though it holds A and B") as c:
    path = c.dir / "system.h5"
    write_h5(path, {"A": random_matrix(rng, (40, 40), np.float64),
                    "B": random_matrix(rng, (40,), np.float64)})
    check_listing(c, path, "foreign (not written by gridlu)")

with suite.case("info on 2 ranks prints the listing once, as on 1 rank") as c:
    path = c.dir / "system.h5"
    c.succeeded(suite.run("generate", "random", "--n", 30, "--out", path, ranks=1))
    one, two = suite.run("info", path, ranks=1), suite.run("info", path, ranks=2)
    c.succeeded(one)
    c.succeeded(two)
    c.check(one.stdout == two.stdout, f"1 rank:\n{one.stdout}\n2 ranks:\n{two.stdout}")

with suite.case("info on a file that is not HDF5: exit 3") as c:
    path = c.dir / "notes.h5"
    path.write_text("panel charges, computed by hand\n" * 50)
    c.failed_with(suite.run("info", path, ranks=2), 3)

suite.finish()

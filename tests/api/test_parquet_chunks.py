"""The Parquet reader in the CSV upload's long layout: the chunks it yields are the CSV upload's
rows (so the chunked assessment equals the one-shot assessment of the CSV upload, bit for bit),
and a bad file gets the CSV upload's errors, naming the row and the column."""

from __future__ import annotations

import csv
import io

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from service.core import assess, default_policy
from service.core.batch import stack_batches
from service.core.chunked import assess_chunks
from service.ingest import RequestInvalid, RequestUnparseable, parse_csv_request
from service.ingest.parquet_chunks import ParquetChunks
from tests.core.test_chunked import assert_same

PARAMS = {"model": "m", "version": "1", "season_length": "4", "level": "0.8"}


def invented_long(seed=20261203, n=23):
    """Invented weekly sales of ``n`` stores in the long layout (seeded): ragged lengths, gaps
    (null actuals), holdout rows for most, interval bounds for some, ISO timestamps."""
    rng = np.random.default_rng(seed)
    out = {k: [] for k in ("series_id", "timestamp", "part", "actual", "fitted", "lower", "upper")}
    for i in range(n):
        t = int(rng.integers(12, 40))
        h = int(rng.integers(0, 6)) if i % 4 else 0
        level = rng.uniform(10, 90)
        day = 0
        for j in range(t + h):
            hold = j >= t
            y = level + 4 * np.sin(j) + rng.standard_normal()
            f = y - rng.standard_normal() - 0.2
            out["series_id"].append(f"shop-{i:02d}")
            out["timestamp"].append(f"2026-{1 + day // 28:02d}-{1 + day % 28:02d}")
            day += 1
            out["part"].append("holdout" if hold else ("train" if j % 2 else None))
            out["actual"].append(None if (not hold and rng.random() < 0.05) else float(y))
            out["fitted"].append(None if j == 0 else float(f))
            bounded = hold and i % 3 != 0
            out["lower"].append(float(f - 2) if bounded else None)
            out["upper"].append(float(f + 2) if bounded else None)
    return out


def to_csv(cols):
    buf = io.StringIO()
    w = csv.writer(buf)
    names = list(cols)
    w.writerow(names)
    for row in zip(*(cols[k] for k in names), strict=True):
        w.writerow(["" if v is None else (repr(v) if isinstance(v, float) else v) for v in row])
    return buf.getvalue()


def write(tmp_path, cols, name="fleet.parquet", **kw):
    path = tmp_path / name
    pq.write_table(pa.table(cols), path, **kw)
    return path


@pytest.mark.parametrize("per_chunk", [1, 7, 1000])
def test_chunks_are_the_csv_uploads_rows(tmp_path, per_chunk):
    cols = invented_long()
    req = parse_csv_request(to_csv(cols), PARAMS)
    # Record batches of 37 rows: series straddle the batches' boundaries.
    chunks = ParquetChunks(
        write(tmp_path, cols, row_group_size=50),
        season_length=4,
        level=0.8,
        series_per_chunk=per_chunk,
        batch_rows=37,
    )
    assert chunks.n_series == req.batch.n_series == 23
    parts = list(chunks)
    assert [p.n_series for p in parts][:1] == [min(per_chunk, 23)]
    whole = stack_batches(parts)
    one = req.batch
    assert whole.ids == one.ids
    for name in ("actuals", "fitted", "weights", "lengths", "burn_in", "weights_given"):
        assert np.array_equal(getattr(whole, name), getattr(one, name), equal_nan=True), name
    for name in ("actuals", "forecasts", "lower", "upper", "level"):
        got, want = getattr(whole.holdout, name), getattr(one.holdout, name)
        assert np.array_equal(got, want, equal_nan=True), name
    policy = default_policy()
    assert_same(assess(one, policy), assess_chunks(chunks, policy))


def test_integer_ids_and_no_optional_columns(tmp_path):
    cols = {
        "series_id": [1, 1, 1, 2, 2, 2],
        "actual": [1.0, 2, 3, 4, 5, 7],
        "fitted": [None, 2.5, 2, 4, 4, 6],
    }
    chunks = ParquetChunks(write(tmp_path, cols), series_per_chunk=1)
    got = list(chunks)
    assert [b.ids for b in got] == [("1",), ("2",)]
    assert chunks.horizon == 0 and not chunks.intervals and got[0].holdout is None
    assert np.array_equal(got[1].actuals, [[4.0, 5.0, 7.0]])


def csv_loc(cols):
    """The CSV upload's first error for the same rows (line N + 1 is data row N)."""
    with pytest.raises(RequestInvalid) as err:
        parse_csv_request(to_csv(cols), PARAMS)
    return err.value.errors[0]


def parquet_errors(tmp_path, cols, **kw):
    with pytest.raises(RequestInvalid) as err:
        ParquetChunks(write(tmp_path, cols, **kw), season_length=4, batch_rows=16)
    return err.value.errors


def small():
    return {
        "series_id": ["a", "a", "a", "b", "b", "b"],
        "timestamp": ["2026-01-01", "2026-01-02", "2026-01-03"] * 2,
        "part": ["train", "train", "holdout", "train", "train", "holdout"],
        "actual": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
        "fitted": [None, 2.5, 2.0, 4.0, 4.5, 6.5],
        "lower": [None, None, 1.0, None, None, 5.0],
        "upper": [None, None, 4.0, None, None, 8.0],
    }


@pytest.mark.parametrize(
    ("column", "row", "value", "message"),
    [
        ("series_id", 2, "", "must be a non-empty string, got an empty string at data row 2"),
        ("part", 3, "test", "must be train or holdout, got 'test'"),
        ("lower", 1, 0.5, "lower and upper belong on holdout rows only"),
        ("actual", 5, float("nan"), "must be a finite number or empty"),
        ("fitted", 4, float("inf"), "must be a finite number or empty"),
    ],
)
def test_row_errors_name_the_row_and_column_as_the_csv_upload_does(
    tmp_path, column, row, value, message
):
    cols = small()
    cols[column][row - 1] = value
    if column == "lower":
        cols["upper"][row - 1] = 9.0
    errors = parquet_errors(tmp_path, cols)
    assert errors[0]["loc"] == f"row[{row}].{column}"
    assert message in errors[0]["message"]
    # The CSV upload names the same column of the same row (its line N + 1, after the header).
    want = csv_loc(cols)
    assert want["loc"] == f"line[{row + 1}].{column}"
    assert message in want["message"]


def test_beyond_the_accepted_magnitude(tmp_path):
    cols = small()
    cols["actual"][1] = 1e300
    errors = parquet_errors(tmp_path, cols)
    assert errors[0]["loc"] == "row[2].actual"
    assert "beyond the accepted magnitude" in errors[0]["message"]
    assert "beyond the accepted magnitude" in csv_loc(cols)["message"]


def test_a_series_must_be_contiguous(tmp_path):
    cols = small()
    for k in cols:
        cols[k] = cols[k] + [cols[k][0]]  # series "a" again after "b"
    cols["part"][-1] = "train"
    cols["timestamp"][-1] = "2026-02-01"
    errors = parquet_errors(tmp_path, cols)
    assert errors[0] == {
        "loc": "row[7].series_id",
        "message": "series 'a' appears again after other series: the rows of a series must "
        "be contiguous",
    }


def test_periods_strictly_increasing_across_record_batches(tmp_path):
    cols = {
        "series_id": ["a"] * 20,
        "timestamp": [f"2026-01-{d:02d}" for d in range(1, 21)],
        "actual": [float(v) for v in range(20)],
        "fitted": [None] + [float(v) for v in range(19)],
    }
    cols["timestamp"][16] = cols["timestamp"][15]  # a duplicate period, first row of batch 2
    errors = parquet_errors(tmp_path, cols)
    assert errors[0]["loc"] == "row[17].timestamp"
    assert "strictly increasing" in errors[0]["message"]


def test_series_errors(tmp_path):
    cols = small()
    cols["part"][3:5] = ["holdout", "holdout"]  # series b: holdout rows only
    cols["lower"][3:5] = [3.0, 4.0]
    cols["upper"][3:5] = [5.0, None]  # and a bound without the other
    locs = {e["loc"]: e["message"] for e in parquet_errors(tmp_path, cols)}
    assert "has holdout rows but no train rows" in locs["series[1].actuals"]
    assert "same holdout rows" in locs["series[1].holdout.lower"]


def test_crossed_bounds(tmp_path):
    cols = small()
    cols["lower"][2], cols["upper"][2] = 5.0, 4.0
    errors = parquet_errors(tmp_path, cols)
    assert errors[0]["loc"] == "row[3].lower"
    assert "above upper bound" in errors[0]["message"]


def test_header_errors(tmp_path):
    cols = small()
    del cols["fitted"]
    cols["weight"] = [1.0] * 6
    cols["actual"] = [str(v) for v in cols["actual"]]
    locs = {e["loc"]: e["message"] for e in parquet_errors(tmp_path, cols)}
    assert locs["header.fitted"].startswith("required column 'fitted' is missing")
    assert locs["header.weight"].startswith("unknown column")
    assert locs["header.actual"] == "must hold numbers, not string"


def test_not_parquet(tmp_path):
    path = tmp_path / "x.parquet"
    path.write_bytes(b"series_id,actual\n")
    with pytest.raises(RequestUnparseable) as err:
        ParquetChunks(path)
    assert err.value.errors[0]["loc"] == "body"

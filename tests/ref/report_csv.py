#!/usr/bin/python3
"""Loads a results.csv with pandas (Debian python3-pandas) and reports what it found.

Usage: report_csv.py results.csv COLUMNS
COLUMNS is the documented header, comma-separated. Prints JSON: rows, columns (as pandas read
them), whether they equal COLUMNS, the dtype of "value", the count of empty (NaN) values, the
metrics, and the test-part Jaccard of every selected row keyed by dataset/scan/method/grid_index.
Exits 1 when the columns differ.
"""
import json
import sys

import pandas as pd


def main():
    want = sys.argv[2].split(",")
    df = pd.read_csv(sys.argv[1], keep_default_na=True, dtype={"params": str})
    cols = list(df.columns)
    jac = df[(df["metric"] == "jaccard") & (df["part"] == "test")]
    out = {
        "rows": int(len(df)),
        "columns": cols,
        "columns_match": cols == want,
        "value_dtype": str(df["value"].dtype),
        "value_nan": int(df["value"].isna().sum()),
        "metrics": sorted(df["metric"].unique().tolist()),
        "test_jaccard": {
            "%s/%s/%s/%d" % (r.dataset, r.scan, r.method, int(r.grid_index)): (None if pd.isna(r.value) else float(r.value))
            for r in jac.itertuples()
        },
    }
    print(json.dumps(out))
    sys.exit(0 if out["columns_match"] else 1)


if __name__ == "__main__":
    main()

"""Reads a ledger CSV written by `spurion ledger export` with pandas and prints, as JSON, what
pandas read: every field as text (the way to keep an empty note "" and a note "NA" as written),
and what pandas' default reading makes of it.

Needs pandas (pinned in tests/reference/requirements.txt: pandas 3.1.1). Run by
tests/suite/ledger.rs: python ledger_pandas.py LEDGER.csv
"""

import json
import sys

import pandas as pd

path = sys.argv[1]
text = pd.read_csv(path, dtype=str, keep_default_na=False)
plain = pd.read_csv(path)

rows = []
for r in text.to_dict(orient="records"):
    r["drawn_regions"] = json.loads(r["drawn_regions"]) if r["drawn_regions"] else []
    rows.append(r)

print(
    json.dumps(
        {
            "pandas": pd.__version__,
            "columns": list(text.columns),
            "rows": rows,
            "default_read": {
                "rows": int(len(plain)),
                "columns": list(plain.columns),
                "verdict_missing": int(plain["verdict"].isna().sum()),
                "image_width": [None if pd.isna(v) else float(v) for v in plain["image_width"]],
            },
        }
    )
)

"""Small helpers for tables that cross a boundary (JSON exports)."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd


def json_records(frame: pd.DataFrame | None) -> list[dict[str, Any]]:
    """Return a table's rows as JSON-safe dicts: missing values as None, numpy scalars as Python."""
    if frame is None or frame.empty:
        return []
    clean = frame.astype(object).where(pd.notna(frame), None)
    return [
        {k: (v.item() if isinstance(v, np.generic) else v) for k, v in row.items()}
        for row in clean.to_dict(orient="records")
    ]

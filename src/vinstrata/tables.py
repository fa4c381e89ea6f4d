"""Writing output tables: one CSV convention for every contract file.

UTF-8, comma-delimited, "\\n" line ends, no index; floats with up to 6
significant digits; booleans as ``true`` / ``false``; missing values empty.
The same frame always gives the same bytes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd


def _float_text(values: np.ndarray) -> list[str]:
    # "%.6g" per value in a comprehension: several times faster than to_csv's float_format
    return ["" if v != v else f"{v:.6g}" for v in values.tolist()]


def _cell_frame(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    for name in out.columns:
        column = out[name]
        if pd.api.types.is_float_dtype(column.dtype):
            out[name] = _float_text(column.to_numpy(dtype=float))
        elif column.dtype == bool:
            out[name] = np.where(column.to_numpy(), "true", "false")
        elif column.dtype == object and pd.api.types.infer_dtype(column, skipna=True) in (
                "boolean", "mixed"):
            out[name] = ["true" if v is True or v is np.True_ else
                         "false" if v is False or v is np.False_ else v
                         for v in column.to_numpy()]
    return out


def write_csv(frame: pd.DataFrame, path: str | Path) -> Path:
    """Write ``frame`` to ``path`` in the engine's CSV convention."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    _cell_frame(frame).to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
    return path

"""Convert the Meuse data set from Debian's r-cran-sp package into plain CSV files.

Run once from the repository root with the test venv (it needs the ``rdata`` package)::

    .venv/bin/python tools/convert_meuse.py

It reads ``meuse.rda`` (155 topsoil samples) and ``meuse.grid.rda`` (the 40 m
prediction grid, 3103 cells) and writes ``tests/data/meuse.csv`` and
``tests/data/meuse_grid.csv``. Coordinates stay in EPSG:28992 (Amersfoort / RD New,
metres). Factor columns are written as their labels; missing values as empty fields.
"""
from __future__ import annotations

import argparse
import csv
import math
from pathlib import Path

import rdata

RDA_FOLDER = Path("/usr/lib/R/site-library/sp/data")
OUT_FOLDER = Path(__file__).resolve().parent.parent / "tests" / "data"

SAMPLE_COLUMNS = [
    "x", "y", "cadmium", "copper", "lead", "zinc", "elev", "dist", "om",
    "ffreq", "soil", "lime", "landuse", "dist.m",
]
GRID_COLUMNS = ["x", "y", "part.a", "part.b", "dist", "soil", "ffreq"]


def read_frame(rda_path: Path, name: str):
    """Return the data frame called ``name`` stored in the .rda file ``rda_path``."""
    frames = rdata.read_rda(str(rda_path))
    if name not in frames:
        raise SystemExit(f"{rda_path} holds {sorted(frames)}, not {name!r}")
    return frames[name]


def cell_text(value: object) -> str:
    """Text of one CSV field: shortest exact float repr, integral floats without '.0', NA empty."""
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return str(int(value)) if value.is_integer() else repr(value)
    return str(value)


def write_csv(frame, columns: list[str], path: Path, sample_columns: bool) -> None:
    """Write ``columns`` of ``frame`` to ``path``; sample files get an id (1..n) and sample_no."""
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise SystemExit(f"{path.name}: columns {missing} not found in the .rda data frame")
    header = (["id", "sample_no"] if sample_columns else []) + columns
    values = [frame[c].astype(object).tolist() for c in columns]
    tmp = path.with_suffix(".csv.tmp")
    with open(tmp, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        for i, row_name in enumerate(frame.index):
            prefix = [str(i + 1), str(row_name)] if sample_columns else []
            writer.writerow(prefix + [cell_text(col[i]) for col in values])
    tmp.replace(path)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rda-folder", type=Path, default=RDA_FOLDER)
    parser.add_argument("--out-folder", type=Path, default=OUT_FOLDER)
    args = parser.parse_args()
    args.out_folder.mkdir(parents=True, exist_ok=True)
    samples = read_frame(args.rda_folder / "meuse.rda", "meuse")
    grid = read_frame(args.rda_folder / "meuse.grid.rda", "meuse.grid")
    write_csv(samples, SAMPLE_COLUMNS, args.out_folder / "meuse.csv", sample_columns=True)
    write_csv(grid, GRID_COLUMNS, args.out_folder / "meuse_grid.csv", sample_columns=False)
    print(f"wrote {len(samples)} samples and {len(grid)} grid cells to {args.out_folder}")


if __name__ == "__main__":
    main()

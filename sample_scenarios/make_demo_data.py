"""Regenerate the demo bathymetry grids of the invented Meridane coast into ./data/."""

from __future__ import annotations

import pathlib

from tsunamifocus.products.demo import write_demo_data

if __name__ == "__main__":
    here = pathlib.Path(__file__).resolve().parent
    for kind, path in write_demo_data(here / "data").items():
        print(f"{kind}: {path}")

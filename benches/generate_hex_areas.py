"""Invented areas on a grid of hexagons, for benches/neighbour_prior.sh: a
GeoJSON map of COLUMNS x ROWS pointy-top hexagons on an integer lattice (odd
rows shifted half a cell, so neighbours share corners exactly; interior areas
have 6 neighbours), and a CSV of each area's expected count and events drawn
from a smooth risk surface (neighbours alike) times a Gamma(20, 20) draw.

usage: python benches/generate_hex_areas.py COLUMNS ROWS MAP.geojson AREAS.csv
"""

import json
import sys

import numpy as np


def main():
    columns, rows = int(sys.argv[1]), int(sys.argv[2])
    map_path, areas_path = sys.argv[3], sys.argv[4]
    rng = np.random.default_rng(20261204)
    corners = [(0, 2), (1, 1), (1, -1), (0, -2), (-1, -1), (-1, 1)]
    features = []
    for row in range(rows):
        for col in range(columns):
            cx, cy = 2 * col + (row & 1), 3 * row
            ring = [[cx + dx, cy + dy] for dx, dy in corners]
            ring.append(ring[0])
            features.append(
                {
                    "type": "Feature",
                    "properties": {"area": f"a{row * columns + col:07d}"},
                    "geometry": {"type": "Polygon", "coordinates": [ring]},
                }
            )
    with open(map_path, "w") as out:
        json.dump({"type": "FeatureCollection", "features": features}, out)
    count = columns * rows
    col, row = np.tile(np.arange(columns), rows), np.repeat(np.arange(rows), columns)
    surface = np.exp(0.3 * np.sin(col / 25.0) * np.cos(row / 20.0))
    expected = rng.lognormal(np.log(20.0), 0.9, size=count)
    events = rng.poisson(expected * surface * rng.gamma(20.0, 1.0 / 20.0, size=count))
    with open(areas_path, "w") as out:
        out.write("area,events,expected\n")
        for i in range(count):
            out.write(f"a{i:07d},{events[i]},{expected[i]:.6f}\n")


if __name__ == "__main__":
    main()

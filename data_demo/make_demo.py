"""Rebuild the Harrow Vale demo data (invented district) in this folder.

Usage: python data_demo/make_demo.py
"""

from pathlib import Path

from curvescan.demo_data import build

if __name__ == "__main__":
    paths = build(Path(__file__).resolve().parent)
    for name, path in paths.items():
        print(f"{name}: {path} ({path.stat().st_size / 1e6:.2f} MB)")

"""Write the small phantom files in phantoms/: a TIFF (with voxel size) and
a JSON of its truth for each."""

from pathlib import Path

from skelmorph.io import write_json, write_tiff
from skelmorph.phantoms import make

CASES = {
    "torus": {}, "y": {}, "frame": {}, "lattice": {}, "helix": {},
    "tree": {"seed": 0}, "venation": {"n_spurs": 3, "seed": 0},
    "foam": {"size": 48.0, "seed": 0},
}


def main(folder=Path(__file__).resolve().parent.parent / "phantoms"):
    folder.mkdir(exist_ok=True)
    for name, kwargs in CASES.items():
        ph = make(name, **kwargs)
        write_tiff(folder / f"{name}.tif", ph.mask, ph.spacing, ph.unit)
        write_json(folder / f"{name}.json", {"phantom": name, "parameters": kwargs,
                                             "spacing": ph.spacing, "unit": ph.unit,
                                             "shape": list(ph.mask.shape), "truth": ph.truth})
        print(f"{name:9s} {ph.mask.shape}")


if __name__ == "__main__":
    main()

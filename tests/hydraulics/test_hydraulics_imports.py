"""hydraulics/ stays pure: numpy/scipy (and numba for the compiled kernel) only, no GIS or I/O
libraries (the layering rule of DEVELOPERS.md)."""
import ast
from pathlib import Path

import geoflow.hydraulics

ALLOWED_GEOFLOW = {"geoflow.errors"}
FORBIDDEN = {"rasterio", "geopandas", "shapely", "dask", "pyogrio", "pyproj", "fiona", "osgeo",
             "matplotlib", "xarray"}


def test_hydraulics_imports_are_pure():
    root = Path(geoflow.hydraulics.__file__).parent
    files = sorted(root.glob("*.py"))
    assert len(files) >= 4
    for path in files:
        for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                assert node.level == 0, f"{path.name}: use absolute imports"
                names = [node.module or ""]
            for name in names:
                top = name.split(".")[0]
                assert top not in FORBIDDEN, f"{path.name} imports {name}"
                if top == "geoflow":
                    assert name in ALLOWED_GEOFLOW or name.startswith("geoflow.hydraulics"), \
                        f"{path.name} imports {name}"

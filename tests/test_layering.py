"""The pure stages must stay pure: read their imports with ast (DESIGN.md, 'Rules of thumb')."""
import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "geoflow"
FORBIDDEN = {"rasterio", "geopandas", "fiona", "pyogrio", "dask", "distributed", "osgeo"}
PURE = sorted((PKG / "hydraulics").glob("*.py")) + [PKG / n for n in ("records.py", "config.py", "configmodel.py",
                                                                      "configread.py", "errors.py", "ntables.py")]


def imported_roots(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    roots = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            roots.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            roots.add(node.module.split(".")[0])
    return roots


@pytest.mark.parametrize("path", PURE, ids=lambda p: p.name)
def test_pure_modules_import_no_gis_or_cluster_libraries(path):
    assert not imported_roots(path) & FORBIDDEN


def test_hydraulics_imports_nothing_but_numpy_scipy_and_errors():
    for path in (PKG / "hydraulics").glob("*.py"):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.level >= 2:
                assert node.module in ("errors",), f"{path.name} imports geoflow.{node.module}"
        assert not imported_roots(path) & {"shapely", "pandas", "pyproj", "matplotlib"}, path.name

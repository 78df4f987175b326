"""The pure stages must stay pure: no GIS, raster, cluster or plotting library gets loaded by them.

Two independent guards (common practice, no source):

1. Import each pure module in a fresh interpreter and list what ``sys.modules`` then holds:
   none of the forbidden top-level packages may be there (this sees imports made through any
   chain of geoflow modules, relative or absolute, at any depth).
2. Read every pure module's imports with ``ast``, resolving relative imports to absolute names:
   a pure module may import only other pure geoflow modules and allowed third-party packages.

A third test proves the guards can fail: it copies the package, injects a GIS import into one
pure module and checks that both guards report it.
"""
from __future__ import annotations

import ast
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "geoflow"

GIS_AND_CLUSTER = {"rasterio", "geopandas", "fiona", "pyogrio", "osgeo", "pyproj", "dask", "distributed",
                   "matplotlib"}
#: pure module (or package) -> third-party top-level packages it may import besides the standard library
PURE = {
    "geoflow.constants": set(),
    "geoflow.errors": set(),
    "geoflow.naming": set(),
    "geoflow.flags": set(),
    "geoflow.records": {"numpy", "shapely"},
    "geoflow.config": {"numpy"},
    "geoflow.hydraulics": {"numpy", "scipy", "numba"},
    "geoflow.sections": {"numpy", "shapely", "scipy"},
    "geoflow.roughness": {"numpy", "scipy", "shapely"},       # scipy: least-squares n multipliers (fit)
}
STDLIB = set(sys.stdlib_module_names)


def pure_files(pkg_root: Path) -> dict[str, Path]:
    """{module name: file} of every pure module under ``pkg_root`` (a copy of geoflow/)."""
    out = {}
    for mod in PURE:
        rel = Path(*mod.split(".")[1:])
        folder = pkg_root / rel
        if folder.is_dir():
            for f in sorted(folder.rglob("*.py")):
                parts = f.relative_to(pkg_root).with_suffix("").parts
                name = ".".join(("geoflow",) + tuple(p for p in parts if p != "__init__"))
                out[name] = f
        else:
            out[mod] = folder.with_suffix(".py")
    return out


def owner(module: str) -> str | None:
    """The PURE entry a geoflow module belongs to (None if it is not pure)."""
    for mod in sorted(PURE, key=len, reverse=True):
        if module == mod or module.startswith(mod + "."):
            return mod
    return None


def resolved_imports(path: Path, module: str) -> set[str]:
    """Absolute names of everything ``path`` (module ``module``) imports, relative imports resolved."""
    tree = ast.parse(path.read_text(), filename=str(path))
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            names.add(target)
            if node.level and not node.module:      # "from . import x": x is a module of the package
                names.update(f"{target}.{a.name}" for a in node.names)
    return names


def ast_violations(pkg_root: Path) -> list[str]:
    bad = []
    for module, path in pure_files(pkg_root).items():
        allowed = PURE[owner(module)]
        for name in resolved_imports(path, module):
            top = name.split(".")[0]
            if top == "geoflow":
                if owner(name) is None and name not in ("geoflow",):
                    bad.append(f"{module} imports {name}, which is not a pure module")
            elif top not in STDLIB and top not in allowed and top != "__future__":
                bad.append(f"{module} imports {name}")
    return bad


def loaded_after_import(module: str, sys_path: Path) -> set[str]:
    code = ("import importlib, json, sys; importlib.import_module(%r); "
            "print(json.dumps(sorted({m.split('.')[0] for m in sys.modules})))" % module)
    out = subprocess.run([sys.executable, "-c", code], cwd=sys_path, capture_output=True, text=True, timeout=120,
                         env={"PYTHONPATH": str(sys_path), "PATH": "/usr/bin:/bin"})
    assert out.returncode == 0, out.stderr
    return set(json.loads(out.stdout.strip().splitlines()[-1]))


@pytest.mark.parametrize("module", sorted(PURE))
def test_pure_module_loads_no_gis_cluster_or_plotting_library(module):
    loaded = loaded_after_import(module, ROOT)
    assert not loaded & GIS_AND_CLUSTER, f"importing {module} loaded {sorted(loaded & GIS_AND_CLUSTER)}"
    if module == "geoflow.hydraulics":
        assert not loaded & {"shapely", "pandas"}, sorted(loaded & {"shapely", "pandas"})


def test_pure_modules_import_only_pure_modules_and_allowed_packages():
    assert ast_violations(PKG) == []


def test_the_guards_fail_when_a_gis_import_is_injected(tmp_path):
    copy = tmp_path / "geoflow"
    shutil.copytree(PKG, copy, ignore=shutil.ignore_patterns("__pycache__"))
    target = copy / "hydraulics" / "step.py"
    target.write_text(target.read_text().replace("from __future__ import annotations\n",
                                                 "from __future__ import annotations\n\nfrom ..mapping import engine\n", 1))
    records = copy / "records.py"
    records.write_text(records.read_text().replace("import numpy as np\n", "import numpy as np\nimport rasterio\n", 1))
    found = ast_violations(copy)
    assert any("geoflow.hydraulics.step imports geoflow.mapping" in v for v in found), found
    assert any("geoflow.records imports rasterio" in v for v in found), found
    assert "rasterio" in loaded_after_import("geoflow.hydraulics", tmp_path)

"""No writable numba cache folder: the commands still work, with one warning (io/_numbacache.py).

numba refuses to define a ``cache=True`` function when no cache folder is usable ("cannot cache
function ...: no locator available", numba.core.caching); the folders it tries are the source's
``__pycache__``, ``NUMBA_CACHE_DIR`` and the user cache (numba documentation, "Cache sharing" /
NUMBA_CACHE_DIR). Here the package copy's ``__pycache__`` is a file and home and cache lie in
``/sys``, where even root cannot create folders (Linux sysfs).
"""

from __future__ import annotations

import os
import pathlib
import shutil
import subprocess
import sys

import tsunamifocus

_SCRIPT = """
import warnings
from tsunamifocus.cli.app import main
assert main(["inspect", {grid!r}]) == 0
from tsunamifocus.io import _numbacache as c
import tsunamifocus.propagation._raykernel as k
with warnings.catch_warnings(record=True) as w:
    warnings.simplefilter("always")
    c.warn_cache_fallback()
    c.warn_cache_fallback()
print("WARNINGS", len(w), w[0].message if w else "")
print("CACHE_DIR", c._DONE[0])
"""


def test_read_only_cache_falls_back_to_a_temporary_folder(tmp_path):
    pkg = pathlib.Path(tsunamifocus.__file__).parent
    shutil.copytree(pkg, tmp_path / "tsunamifocus", ignore=shutil.ignore_patterns("__pycache__"))
    for folder in ("io", "ocean", "propagation"):  # a read-only installation: no folder writable
        (tmp_path / "tsunamifocus" / folder / "__pycache__").write_text("not a folder")
    grid = pkg.parent / "sample_scenarios" / "data" / "meridane_depth_lonlat.nc"
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env.update(PYTHONPATH=str(tmp_path), HOME="/sys/no-home", XDG_CACHE_HOME="/sys/no-cache",
               MPLCONFIGDIR=str(tmp_path / "mpl"), PYTHONDONTWRITEBYTECODE="1")
    r = subprocess.run([sys.executable, "-c", _SCRIPT.format(grid=str(grid))], env=env, cwd=tmp_path,
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr[-2000:]
    assert "Traceback" not in r.stderr
    out = dict(line.split(" ", 1) for line in r.stdout.splitlines() if line.startswith(("WARNINGS", "CACHE_DIR")))
    n, msg = out["WARNINGS"].split(" ", 1)
    assert n == "1" and "no writable cache folder" in msg and "NUMBA_CACHE_DIR" in msg  # one warning
    assert not pathlib.Path(out["CACHE_DIR"]).exists()  # the temporary cache is removed at exit

"""`irpipe --help` stays fast because the CLI module imports no heavy package at import
time (checked on sys.modules in a fresh interpreter, not by timing)."""
import json
import subprocess
import sys

HEAVY = ("matplotlib", "dask", "distributed", "xarray", "skimage", "scipy", "zarr")


def test_cli_module_imports_no_heavy_package():
    code = ("import json, sys, irpipe.cli; "
            f"print(json.dumps([m for m in {HEAVY!r} if m in sys.modules]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert json.loads(out.stdout) == []


def test_help_parses_without_heavy_imports():
    code = ("import json, sys, contextlib, io, irpipe.cli as c\n"
            "with contextlib.redirect_stdout(io.StringIO()):\n"
            "    try:\n        c.main(['--help'])\n    except SystemExit:\n        pass\n"
            f"print(json.dumps([m for m in {HEAVY!r} if m in sys.modules]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert json.loads(out.stdout) == []

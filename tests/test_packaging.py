"""The distribution installs exactly one top-level import name, ``cubage`` (issue: one import namespace)."""

from __future__ import annotations

import importlib.metadata as md
import json
import re
import subprocess
import sys


def _installed_top_level() -> set[str]:
    # the installed distribution is the one pip recorded (a build leaves an egg-info without RECORD in the tree)
    dist = next(d for d in md.distributions(name="cubage") if d.read_text("RECORD"))
    direct = dist.read_text("direct_url.json")
    if direct and json.loads(direct).get("dir_info", {}).get("editable"):
        # an editable install maps names through setuptools' finder; its MAPPING holds the top-level names
        finder = next(f for f in dist.files if re.match(r"__editable___cubage_.*_finder\.py$", str(f)))
        text = finder.read_text()
        mapping = re.search(r"MAPPING\s*(?::[^=]*)?=\s*(\{.*?\})", text, re.S).group(1)
        return {name.split(".")[0] for name in re.findall(r"'([\w.]+)':", mapping)}
    names = set()
    for f in dist.files:
        first = f.parts[0]
        if first.startswith("..") or first.endswith((".dist-info", ".pth")) or first == "__pycache__":
            continue
        names.add(first.removesuffix(".py"))
    return names


def test_only_cubage_is_installed_at_top_level():
    assert sorted(_installed_top_level()) == ["cubage"]


def test_python_dash_m_and_version():
    out = subprocess.run([sys.executable, "-m", "cubage", "--version"], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0
    assert out.stdout.strip() == f"cubage {md.version('cubage')}"


def test_public_api_names():
    import cubage

    for name in ("integrate", "Box", "Simplex", "Run", "Result"):
        assert hasattr(cubage, name), name

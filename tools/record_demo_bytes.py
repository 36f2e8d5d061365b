"""Record the SHA-256 of every data file of the demo bundles (short compiles).

The record is the guard of the reproducibility promise across refactoring:
``tests/test_demo_bytes.py`` recompiles each demo with the same settings and
compares. Run this only when a change is *meant* to change the numbers (and
then bump ``fading.GENERATOR_VERSION``); it prints which files changed.

    python tools/record_demo_bytes.py            # rewrite tests/data/demo_bytes.json
    python tools/record_demo_bytes.py --check    # compare only, exit 1 on a difference
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
RECORD = ROOT / "tests" / "data" / "demo_bytes.json"
DURATION_S = 2.0  # short: the bytes of a longer run follow from the same keyed blocks


def demo_hashes() -> dict:
    import numpy
    import scipy

    import emucompile

    out = {"numpy": numpy.__version__, "scipy": scipy.__version__,
           "generator_version": emucompile.GENERATOR_VERSION, "demos": {}}
    with tempfile.TemporaryDirectory() as tmp:
        for path in sorted((ROOT / "profiles_demo").glob("*")):
            if path.suffix not in (".yaml", ".json") or "campaign" in path.name:
                continue
            result = emucompile.compile_profile(str(path), Path(tmp) / path.stem,
                                                duration_s=DURATION_S)
            files = {f["name"]: f["sha256"] for f in result.manifest["files"]}
            out["demos"][path.name] = {"method": result.manifest["method"], "files": files}
    return out


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true")
    args = parser.parse_args()
    now = demo_hashes()
    old = json.loads(RECORD.read_text()) if RECORD.exists() else {"demos": {}}
    changed = [f"{demo}/{name}" for demo, rec in now["demos"].items()
               for name, sha in rec["files"].items()
               if old["demos"].get(demo, {}).get("files", {}).get(name) != sha]
    print("changed:", ", ".join(changed) if changed else "none")
    if args.check:
        return 1 if changed else 0
    RECORD.write_text(json.dumps(now, indent=1, sort_keys=True) + "\n")
    print(f"wrote {RECORD.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

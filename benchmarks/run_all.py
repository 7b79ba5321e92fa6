"""Run every benchmark of this directory and collect their figures in one JSON file.

Usage: python benchmarks/run_all.py [--out benchmark-results.json]
Each benchmark prints its own figures; none of them is part of `make test`.
"""

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default="benchmark-results.json", help="JSON file collecting every figure")
    args = parser.parse_args(argv)
    figures, failed = {}, []
    for script in sorted(HERE.glob("bench_*.py")):
        print(f"== {script.name}", flush=True)
        with tempfile.NamedTemporaryFile(suffix=".json") as tmp:
            proc = subprocess.run([sys.executable, str(script), "--json", tmp.name])
            if proc.returncode == 0:
                figures[script.stem] = json.loads(Path(tmp.name).read_text() or "{}")
            else:
                failed.append(script.name)
    Path(args.out).write_text(json.dumps(figures, indent=2))
    print(f"figures of {len(figures)} benchmarks in {args.out}" + (f"; failed: {', '.join(failed)}" if failed else ""))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

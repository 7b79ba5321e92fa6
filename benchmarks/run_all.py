"""Run every benchmark of this directory and collect their figures in one JSON file.

Usage: python benchmarks/run_all.py [--out benchmark-results.json]
Each benchmark prints its own figures; none of them is part of `make test`. Benchmarks
that need input (an archive, pairs, a model, an output directory) are listed as skipped;
those without a ``--json`` option run without it (their figures are printed only).
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
    skipped = []
    for script in sorted(HERE.glob("bench_*.py")):
        source = script.read_text()
        if "required=True" in source:
            # Benchmarks of a model's own archive or pairs, or that build hours of runs: their
            # --help says what to give them.
            print(f"== {script.name}: skipped (needs input; see its --help)", flush=True)
            skipped.append(script.name)
            continue
        print(f"== {script.name}", flush=True)
        with tempfile.NamedTemporaryFile(suffix=".json") as tmp:
            command = [sys.executable, str(script)] + (["--json", tmp.name] if "--json" in source else [])
            proc = subprocess.run(command)
            if proc.returncode == 0:
                figures[script.stem] = json.loads(Path(tmp.name).read_text() or "{}")
            else:
                failed.append(script.name)
    Path(args.out).write_text(json.dumps(figures, indent=2))
    print(f"figures of {len(figures)} benchmarks in {args.out}" + (f"; skipped: {', '.join(skipped)}" if skipped else "")
          + (f"; failed: {', '.join(failed)}" if failed else ""))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

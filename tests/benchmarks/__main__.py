import argparse
import sys
from pathlib import Path

from tests.benchmarks.harness import run_cases, table, write_summary

parser = argparse.ArgumentParser(prog="python -m tests.benchmarks")
parser.add_argument("--full", action="store_true", help="full sizes (make bench); default is the quick mode")
parser.add_argument("--only", action="append", default=[], help="run only this case (repeatable)")
parser.add_argument("--output", type=Path, default=Path("bench-results/summary.json"))
parser.add_argument("--workdir", type=Path, default=None, help="folder for the synthetic files")
args = parser.parse_args()
results = run_cases(args.only, full=args.full, workdir=args.workdir)
write_summary(results, args.output, full=args.full)
sys.stdout.write(table(results) + f"\n\nsummary: {args.output}\n")
sys.exit(1 if any(r.get("error") for r in results) else 0)

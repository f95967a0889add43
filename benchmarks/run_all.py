"""Run every benchmark script in this folder in turn (``make bench``)."""

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

for script in sorted(HERE.glob("bench_*.py")):
    print(f"== {script.name}", flush=True)
    subprocess.run([sys.executable, str(script)], check=True, cwd=HERE.parent)

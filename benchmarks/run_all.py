"""Run every benchmark script in this folder in turn (``make bench``).

``bench_rank.py`` runs here on 2 x 10^4 rows with 1 and 2 workers (a few minutes on
2 shared cores); run it alone with ``--rows 100000,1000000`` for the survey sizes.
"""

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

ARGS = {"bench_rank.py": ["--rows", "20000", "--workers", "1,2"]}

for script in sorted(HERE.glob("bench_*.py")):
    print(f"== {script.name}", flush=True)
    subprocess.run([sys.executable, str(script), *ARGS.get(script.name, [])], check=True, cwd=HERE.parent)

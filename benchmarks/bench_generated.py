"""The generated-catalog checks of ``tests/test_generated_catalogs.py`` at a larger
number of examples (default 5,000; ``--examples N``), with the time per example.

Run: .venv/bin/python benchmarks/bench_generated.py --examples 5000
"""

import argparse
import sys
import time
import warnings
from pathlib import Path

from hypothesis import Phase, given, settings
from hypothesis import strategies as hs

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
import test_generated_catalogs as generated  # noqa: E402


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--examples", type=int, default=5000)
    args = parser.parse_args()
    warnings.simplefilter("ignore", RuntimeWarning)
    runs = [("check + rank (+ a writer for one in ten)",
             generated.test_generated_catalogs_through_check_and_rank.hypothesis.inner_test,
             {"catalog": generated.catalogs(), "number": hs.integers(0, 2**31)}, args.examples),
            ("every writer and back",
             generated.test_generated_catalogs_through_every_writer_and_back.hypothesis.inner_test,
             {"catalog": generated.catalogs()}, max(1, args.examples // 5))]
    for title, inner, strategies, count in runs:
        test = settings(max_examples=count, deadline=None, phases=[Phase.generate, Phase.shrink])(
            given(**strategies)(inner))
        start = time.perf_counter()
        test()
        took = time.perf_counter() - start
        print(f"{title}: {count} generated catalogs, {took:.1f} s ({1e3 * took / count:.0f} ms each), "
              "no failure")


if __name__ == "__main__":
    main()

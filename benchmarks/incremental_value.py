"""Do the expert rules add value over mined log features?  The main job of rulefeat, from the command line.

A thin wrapper around ``rulefeat evaluate`` (rulefeat/cli/evaluate.py), kept so existing scripts keep working;
every option is the same (``python benchmarks/incremental_value.py --help``)::

    python benchmarks/incremental_value.py                         # simulated demo data, about 1-2 minutes
    python benchmarks/incremental_value.py --students 600 --seed 3 --folds 5 --repeats 2 --out my_report
    python benchmarks/incremental_value.py --full                  # 1M events, 2,000 students, 20,000 windows

On your own data::

    python benchmarks/incremental_value.py --events events.csv --labels windows.csv --rules rules.toml \\
        --columns '{"student": "learner_id", "time": "timestamp"}' --label coded --population school
"""

from __future__ import annotations

import sys

from rulefeat.cli import main as rulefeat_main


def main(argv=None) -> int:
    return rulefeat_main(["evaluate", *(sys.argv[1:] if argv is None else argv)])


if __name__ == "__main__":
    sys.exit(main())

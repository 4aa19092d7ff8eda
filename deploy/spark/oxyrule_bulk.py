"""``spark-submit`` entry point of ``oxyrule bulk`` (the Spark engine).

    spark-submit [spark options] oxyrule_bulk.py EXPORT_DIR OUT_DIR [oxyrule bulk options]

The same command line as ``oxyrule bulk``, always with ``--engine spark``; the Spark master,
resources and Python environment come from spark-submit. See the README ("On a cluster").
"""

from __future__ import annotations

import sys

from service.cli import main

if __name__ == "__main__":
    arguments = sys.argv[1:]
    if "--engine" not in arguments:
        arguments += ["--engine", "spark"]
    raise SystemExit(main(["bulk", *arguments]))

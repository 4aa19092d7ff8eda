"""Read the shared contract checker's report on stdin; fail on anything but the departures
the project documents (see .ci/run):

* `mixed` with one likely cause that leaves the A-a gradient normal beside a gas-exchange
  mechanism still possible (docs/clinical-logic.md);
* `sf-ratio` in UCUM `%`, not `1`: S/F is SpO2 in % over FiO2 as a fraction (Rice 2007 quotes
  it as e.g. 405), and in UCUM `%` is 10^-2, so 405 with unit `1` would say a ratio of 405, not
  4.05; the number is kept as clinicians read it and the unit made true (README, "What it
  answers")."""

from __future__ import annotations

import json
import sys
from pathlib import Path

MIXED = "pattern mixed but fewer than two mechanisms likely"
SF_RATIO_PERCENT = "sf-ratio unit '%', want one of ['1']"
GAS_EXCHANGE = {"diffusion-limitation", "vq-mismatch", "shunt"}


def _grades(path: Path) -> dict[str, str]:
    result = json.loads(path.read_text(encoding="utf-8"))
    parameters = next(
        e["resource"] for e in result["entry"] if e["resource"]["resourceType"] == "Parameters"
    )
    grades: dict[str, str] = {}
    for p in parameters["parameter"]:
        if p["name"] == "mechanism":
            parts = {q["name"]: q for q in p["part"]}
            grades[parts["code"]["valueCode"]] = parts["grade"]["valueCode"]
    return grades


def _documented(path: Path) -> bool:
    grades = _grades(path)
    likely = [c for c, g in grades.items() if g == "likely"]
    open_exchange = any(grades.get(c) == "possible" for c in GAS_EXCHANGE)
    return len(likely) == 1 and likely[0] not in GAS_EXCHANGE and open_exchange


def main() -> int:
    failed = forgiven = 0
    for line in sys.stdin.read().splitlines():
        if not line.strip() or line.startswith("contract: ok"):
            sys.stdout.write(line + "\n")
            continue
        where, _, problem = line.rpartition(": ")
        path = Path(where.rsplit(":", 1)[0])
        if problem.strip() == MIXED and _documented(path):
            forgiven += 1
            continue
        if problem.strip() == SF_RATIO_PERCENT:
            forgiven += 1
            continue
        sys.stdout.write(line + "\n")
        failed += 1
    sys.stdout.write(
        f"contract: {failed} problems, {forgiven} documented departures"
        " (mixed beside an open defect; S/F in UCUM %)\n"
    )
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

"""Write the invented kiln-line demo table to demo/kiln_line.csv (next to this script)."""
from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

try:
    from planner.scenario import write_kiln_csv
except ImportError:
    sys.path.insert(0, str(HERE.parent))
    from planner.scenario import write_kiln_csv


def main() -> None:
    out = HERE / "kiln_line.csv"
    write_kiln_csv(out)
    print(f"wrote {out}")


if __name__ == "__main__":
    main()

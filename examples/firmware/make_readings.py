"""Write readings.h: the first rows of a CSV as a C table, in the model's input order.
Usage: python3 make_readings.py MODEL.ncast DATA.csv readings.h [ROWS]"""

import sys

from nodecast.compiler import load
from nodecast.compiler.csvio import read_table


def main(model: str, data: str, out: str, rows: str = "16") -> None:
    names = load(model).network.feature_names
    X = read_table(data).numbers(names)[: int(rows)]
    lines = [f"/* {len(X)} sensor readings for the firmware example, in the model's input order */",
             f"#define N_READINGS {len(X)}U",
             f"static const double READINGS[N_READINGS][{len(names)}] = {{"]
    lines += ["    {" + ", ".join(repr(float(v)) for v in row) + "}," for row in X]
    lines.append("};")
    with open(out, "w", encoding="ascii") as handle:
        handle.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main(*sys.argv[1:5])

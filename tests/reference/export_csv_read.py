"""Read a `tragus export --format csv` file with Python's own csv module and print its
rows as one JSON list of objects keyed by the header, every value the string as read.

The csv module's default dialect ("excel": comma separator, double-quote quoting, a quote
inside a field doubled) is the format of RFC 4180; quoted fields may hold commas, quotes
and line breaks. Standard library only; nothing here imports or runs tragus.

Usage: python3 export_csv_read.py FILE.csv
"""

import csv
import json
import sys


def main() -> None:
    # newline="" as the csv module's documentation asks, so line breaks inside quoted
    # fields reach the reader unchanged.
    with open(sys.argv[1], newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f, dialect="excel", strict=True))
    json.dump(rows, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()

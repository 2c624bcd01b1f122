"""``roomloop bms-map -c SITE.yaml [--csv OUT]``: the BMS face's register map as a document.

The rows come from :class:`roomloop.bms.registers.RegisterMap`, the same map the
server answers from, so what the BMS contractor is handed is what the face serves.
A site without a ``bms:`` section is shown with the section's defaults.
"""

from __future__ import annotations

import argparse
import csv
import sys
from typing import TextIO

from roomloop.bms.registers import RegisterMap
from roomloop.config.loader import load_site
from roomloop.errors import RoomloopError

COLUMNS = ("address", "name", "type", "scale", "unit", "access", "meaning")


class MapFileError(RoomloopError):
    """The CSV file could not be written."""


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)
    regmap = RegisterMap(site)
    rows = regmap.rows()
    try:
        print_map(regmap, rows, sys.stdout)
        sys.stdout.flush()
    except BrokenPipeError:
        return 0
    if args.csv:
        try:
            with open(args.csv, "w", newline="", encoding="utf-8") as out:
                writer = csv.DictWriter(out, fieldnames=COLUMNS)
                writer.writeheader()
                writer.writerows(rows)
        except OSError as exc:
            raise MapFileError(f"cannot write {args.csv}: {exc.strerror or exc}") from None
    return 0


def print_map(regmap: RegisterMap, rows: list[dict[str, str]], out: TextIO) -> None:
    bms = regmap.bms
    where = "off" if not bms.tcp else f"{bms.address}:{bms.port}"
    print(f"site {regmap.site.name}: Modbus TCP {where}", file=out)
    if bms.rtu is not None:
        rtu = bms.rtu
        print(
            f"  RTU slave {rtu.unit_id} on {rtu.device}, {rtu.baud} {rtu.data_bits}"
            f"{rtu.parity}{rtu.stop_bits}",
            file=out,
        )
    print(
        "  holding registers (function 3; 4 reads the same map); writes with function 6 or 16;"
        " addresses 0-based as on the wire",
        file=out,
    )
    widths = {c: max(len(c), *(len(r[c]) for r in rows)) for c in COLUMNS[:-1]}
    print("  ".join(c.ljust(widths[c]) for c in COLUMNS[:-1]) + "  meaning", file=out)
    for row in rows:
        print(
            "  ".join(row[c].ljust(widths[c]) for c in COLUMNS[:-1]) + "  " + row["meaning"],
            file=out,
        )

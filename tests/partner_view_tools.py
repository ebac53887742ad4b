"""Reading ``kinset partners``' terminal table back into numbers (for the tests).

The table is what people read: engineering units with an SI prefix (BIPM SI Brochure,
9th ed., Table 7), ``*`` after a value beyond its tolerance. Parsed here with a prefix
table of its own, not kinset's, so a wrong prefix in kinset shows.
"""

from __future__ import annotations

import re

PREFIX = {"": 1.0, "k": 1e3, "m": 1e-3, "µ": 1e-6, "u": 1e-6, "n": 1e-9, "p": 1e-12,
          "f": 1e-15, "a": 1e-18}


def amount(cell: str, unit: str) -> float:
    """``'62.1 fF*'`` with unit ``F`` -> 6.21e-14; ``'1.2 %'`` with unit ``%`` -> 1.2."""
    m = re.fullmatch(r"(-?[0-9.e+-]+)(?: (\S*?))?\*?", cell.strip())
    assert m, f"not an amount: {cell!r}"
    number, written = float(m.group(1)), (m.group(2) or "")
    assert written.endswith(unit), f"{cell!r} is not in {unit}"
    return number * PREFIX[written[: len(written) - len(unit)]]


def blocks(text: str) -> list[dict]:
    """Each block of the table (the lines from a ``device`` header to a blank line):
    ``{"heads": [...], "allowed": {head: cell}, "rows": [{head: cell}, ...]}``."""
    out, lines = [], text.splitlines()
    for i, line in enumerate(lines):
        if not line.startswith("device "):
            continue
        starts = [m.start() for m in re.finditer(r"(?<!\S)\S", line)]
        heads = line.split()

        def cells(row):
            ends = starts[1:] + [None]
            return {h: row[a:b].strip() for h, a, b in zip(heads, starts, ends)}
        block = {"heads": heads, "allowed": cells(lines[i + 1]), "rows": []}
        for row in lines[i + 2:]:
            if not row.strip():
                break
            block["rows"].append(cells(row))
        out.append(block)
    return out

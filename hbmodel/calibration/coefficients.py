"""Read and rewrite the coefficient cells of a calibration table (``tables/*.csv``).

A coefficient table is CSV with a ``#`` provenance header.  The calibration rewrites only the
cells it fits, formatted to 7 significant digits, and replaces one header block (the lines that
start with ``# calibrated``) naming the stage, the targets used and the coefficients no target
constrains.  Everything else in the file is kept byte for byte.
"""
from __future__ import annotations

from dataclasses import dataclass

__all__ = ["CoefficientTable", "MARK"]

MARK = "# calibrated"


def _fmt(x: float) -> str:
    s = f"{x:.7g}"
    return "0" if s in ("-0", "0") else s


@dataclass(frozen=True)
class CoefficientTable:
    header: tuple[str, ...]      # comment lines (without the calibration block)
    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]

    @classmethod
    def from_text(cls, text: str) -> "CoefficientTable":
        header, body = [], []
        for ln in text.splitlines():
            if ln.lstrip().startswith("#"):
                if not ln.lstrip().startswith(MARK):
                    header.append(ln)
            elif ln.strip():
                body.append(ln)
        columns = tuple(c.strip() for c in body[0].split(","))
        rows = tuple(tuple(c.strip() for c in ln.split(",")) for ln in body[1:])
        return cls(tuple(header), columns, rows)

    def value(self, column: str, row: int) -> float:
        return float(self.rows[row][self.columns.index(column)])

    def n_rows(self) -> int:
        return len(self.rows)

    def with_values(self, cells: dict[tuple[str, int], float]) -> "CoefficientTable":
        rows = [list(r) for r in self.rows]
        for (col, i), v in cells.items():
            rows[i][self.columns.index(col)] = _fmt(float(v))
        return CoefficientTable(self.header, self.columns, tuple(tuple(r) for r in rows))

    def text(self, block: tuple[str, ...] = ()) -> str:
        lines = list(self.header) + [f"{MARK}{'' if b.startswith(':') else ' '}{b}" for b in block]
        lines.append(",".join(self.columns))
        lines += [",".join(r) for r in self.rows]
        return "\n".join(lines) + "\n"

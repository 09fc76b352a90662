"""Quick check of a calibration table: the body of `validate calibrate TABLE.csv`.

The table is a CSV file with a header row naming at least the columns
`concentration` and `absorbance` (one row per reading; replicate readings of a
standard repeat its concentration) and optionally `u_concentration`. Units may
follow a column name in brackets, e.g. `concentration (mg/L)`. Lines starting
with `#` are comments (for example a note on where the data come from).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from validate.inputs.errors import InputError
from validate.inputs.readings import read_text_file, text_lines
from validate.metrology.probability import t_quantile
from validate.model.errors import ModelError
from validate.model.line import fit_line, inverse_prediction
from validate.model.quadratic import FUNCTIONS
from validate.validation.limits import range_flags
from validate.validation.linearity import plain
from validate.validation.summary import validate_calibration

COVERAGE = 0.95  # coverage probability of a sample's expanded uncertainty
REQUIRED = ("concentration", "absorbance")
OPTIONAL = ("u_concentration",)


class TableError(InputError, ValueError):
    """A problem with a calibration table; names the file, the place and the fix."""

    def __init__(self, what: str, *, file, row: int | None = None, column: str | None = None,
                 fix: str | None = None):
        self.row, self.column = row, column
        where = ", ".join(p for p in (f"line {row}" if row else "",
                                      f"column '{column}'" if column else "") if p) or None
        super().__init__(what, file=file, where=where, fix=fix)


class MissingColumnError(TableError):
    pass


class CellError(TableError):
    pass


class DecimalCommaError(TableError):
    pass


class TooFewLevelsError(TableError):
    pass


class SampleError(InputError, ValueError):
    """Bad sample readings given with the quick check."""


@dataclass(frozen=True)
class CalibrationTable:
    path: str
    concentration: tuple[float, ...]
    absorbance: tuple[float, ...]
    u_concentration: tuple[float, ...] | None
    lines: tuple[int, ...]  # file line of each reading
    units: dict  # column -> unit written in the header ("" if none)

    def to_dict(self) -> dict:
        return plain(self)


def _column_name(raw: str) -> tuple[str, str]:
    """'Concentration (mg/L)' -> ('concentration', 'mg/L')."""
    text = raw.strip()
    unit = ""
    for opening, closing in (("(", ")"), ("[", "]")):
        if opening in text and text.endswith(closing):
            text, unit = text[: text.index(opening)], text[text.index(opening) + 1: -1]
    return text.strip().lower().replace(" ", "_"), unit.strip()


def _delimiter(header: str) -> str:
    for candidate in (";", "\t"):
        if candidate in header and "," not in header:
            return candidate
    return ","


COMMA_FIX = ("write numbers with a decimal point (0.125, not 0,125) and separate columns with "
             "commas; in a spreadsheet, export as CSV with '.' as the decimal separator")


def _number(cell: str, *, file, line: int, column: str, delimiter: str) -> float:
    text = cell.strip()
    if text == "":
        raise CellError("empty cell", file=file, row=line, column=column,
                        fix="fill in the value or delete the row")
    if "," in text and "." not in text:
        raise DecimalCommaError(f"'{text}' uses a decimal comma", file=file, row=line,
                                column=column, fix=COMMA_FIX)
    try:
        value = float(text)
    except ValueError:
        raise CellError(f"'{text}' is not a number", file=file, row=line, column=column,
                        fix="give a plain number such as 0.25 or 1.5e-4") from None
    if not math.isfinite(value):
        raise CellError(f"'{text}' is not a finite number", file=file, row=line, column=column,
                        fix="give a measured value")
    return value


def _content_lines(path: Path) -> list[tuple[int, str]]:
    """(line number, text) of every line that is neither blank nor a comment."""
    if not path.exists():  # the one reader below also refuses pipes, devices, binary and huge files
        raise TableError("file not found", file=path, fix="check the path")
    text = read_text_file(path, "calibration table")
    lines = [(i, ln) for i, ln in enumerate(text_lines(text), start=1)
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise TableError("the table is empty", file=path,
                         fix="add a header row 'concentration,absorbance' and one row per reading")
    return lines


def _header(path: Path, line: int, header: str) -> tuple[str, list[tuple[str, str]]]:
    """The delimiter and the (name, unit) of every column; the required columns, once each."""
    delimiter = _delimiter(header)
    names_units = [_column_name(c) for c in next(csv.reader([header], delimiter=delimiter))]
    names = [n for n, _ in names_units]
    missing = [c for c in REQUIRED if c not in names]
    if missing:
        raise MissingColumnError(
            f"missing column(s) {', '.join(missing)}; the header has {', '.join(names) or 'nothing'}",
            file=path, row=line,
            fix="the first row must name the columns 'concentration' and 'absorbance' "
                "(optionally 'u_concentration')")
    for c in REQUIRED + OPTIONAL:
        if names.count(c) > 1:
            raise MissingColumnError(f"column '{c}' appears twice", file=path, row=line,
                                     fix="keep one column of that name")
    return delimiter, names_units


def _row(path: Path, line: int, raw: str, names: list[str], wanted: list[str], delimiter: str) -> dict:
    """The wanted columns' values of one data row, checked."""
    cells = next(csv.reader([raw], delimiter=delimiter))
    if len(cells) != len(names):
        if len(cells) > len(names) and delimiter == ",":
            raise DecimalCommaError(
                f"the row has {len(cells)} cells but the header names {len(names)} columns; "
                "this usually means numbers were written with a decimal comma",
                file=path, row=line, fix=COMMA_FIX)
        raise CellError(f"the row has {len(cells)} cells but the header names {len(names)} "
                        "columns", file=path, row=line, fix="give one value per column")
    values = {}
    for c in wanted:
        value = _number(cells[names.index(c)], file=path, line=line, column=c, delimiter=delimiter)
        if c != "absorbance" and value < 0:
            raise CellError(f"negative {c.replace('_', ' ')} {value:g}", file=path, row=line,
                            column=c, fix="concentrations and their uncertainties are >= 0")
        values[c] = value
    return values


def _check_line_possible(path: Path, cols: dict[str, list[float]]) -> None:
    distinct = len(set(cols["concentration"]))
    if distinct < 3:
        raise TooFewLevelsError(
            f"only {distinct} distinct concentration(s); a calibration check needs at least 3",
            file=path, column="concentration",
            fix="measure standards at 3 or more concentrations (ICH Q2(R1) advises at least 5)")
    if len(set(cols["absorbance"])) == 1:
        raise TableError("every absorbance is the same; no calibration line can be fitted",
                         file=path, column="absorbance",
                         fix="check that the absorbance column holds the readings of the standards")


def load_table(path) -> CalibrationTable:
    """Read and check a calibration table; raise `TableError` with the fix on bad input."""
    path = Path(path)
    lines = _content_lines(path)
    header_line, header = lines[0]
    delimiter, names_units = _header(path, header_line, header)
    names = [n for n, _ in names_units]
    wanted = [c for c in REQUIRED + OPTIONAL if c in names]
    cols: dict[str, list[float]] = {c: [] for c in wanted}
    line_numbers = []
    for line, raw in lines[1:]:
        for c, value in _row(path, line, raw, names, wanted, delimiter).items():
            cols[c].append(value)
        line_numbers.append(line)
    _check_line_possible(path, cols)
    return CalibrationTable(
        str(path), tuple(cols["concentration"]), tuple(cols["absorbance"]),
        tuple(cols["u_concentration"]) if "u_concentration" in cols else None,
        tuple(line_numbers), {n: u for n, u in names_units if n in wanted})


def _sample_entry(fit, summary, index: int, readings) -> dict:
    r = np.asarray(readings, dtype=float).ravel()
    if r.size == 0 or not np.all(np.isfinite(r)):
        raise SampleError(f"sample {index} has no usable readings",
                          fix="give one or more finite absorbance readings per sample")
    ip = inverse_prediction(fit, r)
    flags = range_flags(ip.value, summary.lowest_standard, summary.highest_standard,
                        loq=summary.limits.loq, lod=summary.limits.lod)
    if not ip.finite:
        flags.append("slope not significantly different from zero: no finite interval")
    k = float(t_quantile(0.5 + COVERAGE / 2, ip.dof))  # t quantile at the line's n - 2 (GUM G.3)
    return {"readings": r.tolist(), "replicates": ip.replicates,
            "response_mean": ip.response_mean, "concentration": ip.value,
            "standard_uncertainty": ip.standard_uncertainty, "dof": ip.dof, "flags": flags,
            "coverage_probability": COVERAGE, "coverage_factor": k,
            "expanded_uncertainty": k * ip.standard_uncertainty,
            "source": "x0 = (y0 - a)/b with the observed-scatter uncertainty (ISO 8466-1; "
                      "EURACHEM/CITAC CG4 Example A5)"}


def _check_line_rises(path: str, fit) -> None:
    """A Beer-Lambert line rises: a falling line, or one whose slope does not differ from zero
    (two-sided t-test at 5 %, ISO 8466-1 reads the slope the same way), gives no concentration
    (ModelError, exit 3)."""
    t_value = fit.slope / fit.slope_u if fit.slope_u > 0 else math.inf
    critical = float(t_quantile(0.975, fit.dof)) if fit.dof > 0 else math.inf
    if not fit.slope > 0:
        raise ModelError(f"{path}: the absorbance falls as the concentration rises (slope {fit.slope:.3g}); "
                         "a Beer-Lambert calibration line rises, so no concentration is reported\n"
                         "  what to do: check that the columns are not swapped and that every reading "
                         "belongs to its concentration")
    if not t_value > critical:
        raise ModelError(f"{path}: the slope {fit.slope:.3g} does not differ significantly from zero "
                         f"(t = {t_value:.3g}, critical value {critical:.3g} at 95 %), so no concentration "
                         "is reported\n  what to do: extend the range of the standards or reduce the "
                         "scatter of the readings")


# A bare table states no structure (which rows are repeated readings of one solution), so every
# row is fitted as an independent point, as EURACHEM/CITAC CG4 Example A5 does (from memory).
EVERY_ROW_NOTE = ("every row is fitted as an independent point: a bare table does not say which rows are "
                  "repeated readings of one solution (as EURACHEM/CITAC CG4 Example A5 fits it). If rows are "
                  "repeated readings of one standard, the lack-of-fit and Mandel tests take reading noise for "
                  "the whole scatter and reject a straight line too often; a method file (`validate run`) "
                  "fits one point per prepared solution")


def quick_check(path, samples: list[list[float]] | None = None, function: str = "straight line") -> dict:
    """Fit, linearity tests, ICH limits (sigma from residuals) and optional samples, as plain data.
    With `function = "second order"` the samples are read off y = a + b x + c x^2 (ISO 8466-2) and the
    result adds its coefficients, their standard uncertainties and covariance, and its limits."""
    if function not in FUNCTIONS:
        raise InputError(f"unknown calibration function {function!r}", where="--function",
                         fix='use --function "straight line" or --function "second order"')
    table = load_table(path)
    if function == "second order":
        _check_second_order_levels(table)
    else:
        _check_line_rises(table.path, fit_line(table.concentration, table.absorbance))  # before any statistic
    summary = validate_calibration(table.concentration, table.absorbance)
    fit = summary.fit
    notes = [EVERY_ROW_NOTE] + list(summary.notes)
    if table.u_concentration is not None and fit.slope != 0:
        ratio = max(table.u_concentration) / (fit.residual_sd / abs(fit.slope))
        notes.append(f"the largest u(concentration) is {100 * ratio:.3g} % of the residual "
                     "scatter in concentration units (s/b); the ordinary fit treats "
                     "concentrations as exact (ISO/TS 28037 treats uncertain x)")
    ich = summary.limits.route("ich_residual_sd")
    assert ich is not None  # every line has the residual-SD route
    result = {
        "file": table.path, "units": table.units, "n": fit.n, "points": "every row",
        "distinct_concentrations": len(set(table.concentration)), "dof": fit.dof,
        "slope": fit.slope, "intercept": fit.intercept,
        "slope_standard_uncertainty": fit.slope_u,
        "intercept_standard_uncertainty": fit.intercept_u,
        "slope_intercept_covariance": fit.covariance,
        "residual_standard_deviation": fit.residual_sd, "r_squared": fit.r_squared,
        "lod": ich.lod, "loq": ich.loq, "limit_source": ich.source,
        "linearity": {k: t.to_dict() for k, t in summary.tests().items()},
        "limits": summary.limits.to_dict(),
        "flagged_points": list(summary.points.flagged),
        "readings_outside_absorbance_window": summary.window.outside,
        "absorbance_window": [summary.window.low, summary.window.high],
        "notes": notes,
    }
    if function == "second order":  # the line's statistics stay: its linearity tests say why the curve
        from validate.validation.second_order import quick_second_order

        result.update(quick_second_order(table.path, table.concentration, table.absorbance, samples, COVERAGE))
    elif samples:
        result["sample"] = [_sample_entry(fit, summary, i, s) for i, s in enumerate(samples, 1)]
    return plain(result)



def _check_second_order_levels(table: CalibrationTable) -> None:
    levels = len(set(table.concentration))
    if levels < 4:
        raise TooFewLevelsError(f"the table has {levels} distinct concentrations; a second-order function "
                                f"(three coefficients and a residual scatter) needs at least 4",
                                file=table.path, column="concentration",
                                fix='add standards (ISO 8466-2 asks for about 10 levels, from memory), or use '
                                    '--function "straight line"')

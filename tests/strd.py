"""Read the linear regression files of the NIST Statistical Reference Datasets (StRD).

A file is a header of certified values followed by the data; the header states the line
ranges of both ("Certified Values (lines 31 to 46)", "Data (lines 61 to 96)"), and the
number of observations. We read the ranges from the header, check the observation count,
and keep every number as printed, to be read exactly (``fractions.Fraction``) or as a float.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
RANGE = re.compile(r"(Certified Values|Data)\s*\(lines\s+(\d+)\s+to\s+(\d+)\)")
OBSERVATIONS = re.compile(r"^\s*(\d+)\s+Observations\s*$")
PARAMETER = re.compile(rf"^\s*(B\d+)\s+({NUMBER})\s+({NUMBER})\s*$")
RESIDUAL_SD = re.compile(rf"^\s*Standard Deviation\s+({NUMBER})\s*$")
R_SQUARED = re.compile(rf"^\s*R-Squared\s+({NUMBER})\s*$")
ANOVA = re.compile(
    rf"^\s*(Regression|Residual)\s+(\d+)\s+({NUMBER})\s+({NUMBER})(?:\s+({NUMBER}|Infinity))?\s*$"
)


@dataclass(frozen=True)
class Certified:
    """One certified number as printed, with its float value."""

    text: str

    @property
    def value(self) -> float:
        return float(self.text)

    @property
    def exact(self) -> Fraction:
        return Fraction(self.text)


@dataclass(frozen=True)
class Dataset:
    """A StRD linear regression dataset: the data and NIST's certified results."""

    name: str
    path: Path
    #: Column names from the "Data:" heading line, response first, e.g. ("y", "x").
    columns: tuple[str, ...]
    #: The observations as printed, one tuple of strings per line.
    rows_text: tuple[tuple[str, ...], ...]
    #: Parameter name (B0, B1, ...) -> (estimate, standard deviation of the estimate).
    parameters: dict[str, tuple[Certified, Certified]]
    resid_sd: Certified
    r2: Certified
    #: Analysis of variance: "Regression" / "Residual" -> (degrees of freedom, sum of squares,
    #: mean square).
    anova: dict[str, tuple[int, Certified, Certified]]
    #: The F statistic (text "Infinity" for an exact fit).
    f_statistic: Certified

    def column(self, name: str) -> list[float]:
        """One data column as floats."""
        i = self.columns.index(name)
        return [float(row[i]) for row in self.rows_text]


def read(path: Path) -> Dataset:
    """Parse one linear regression .dat file; raise ValueError on anything unexpected."""
    lines = path.read_text(encoding="ascii").splitlines()
    ranges: dict[str, tuple[int, int]] = {}
    observations = None
    for line in lines[:30]:
        for match in RANGE.finditer(line):
            ranges[match.group(1)] = (int(match.group(2)), int(match.group(3)))
        found = OBSERVATIONS.match(line)
        if found:
            observations = int(found.group(1))
    if set(ranges) != {"Certified Values", "Data"} or observations is None:
        raise ValueError(f"{path.name}: header lacks line ranges or observation count")

    first, last = ranges["Certified Values"]
    parameters: dict[str, tuple[Certified, Certified]] = {}
    anova: dict[str, tuple[int, Certified, Certified]] = {}
    resid_sd = r2 = f_statistic = None
    for line in lines[first - 1 : last]:
        if m := PARAMETER.match(line):
            parameters[m.group(1)] = (Certified(m.group(2)), Certified(m.group(3)))
        elif m := RESIDUAL_SD.match(line):
            resid_sd = Certified(m.group(1))
        elif m := R_SQUARED.match(line):
            r2 = Certified(m.group(1))
        elif m := ANOVA.match(line):
            anova[m.group(1)] = (int(m.group(2)), Certified(m.group(3)), Certified(m.group(4)))
            if m.group(5):
                f_statistic = Certified(m.group(5))
    if (not parameters or resid_sd is None or r2 is None or f_statistic is None
            or set(anova) != {"Regression", "Residual"}):
        raise ValueError(f"{path.name}: certified values incomplete")

    first, last = ranges["Data"]
    heading = lines[first - 2].split()
    if not heading or heading[0] != "Data:":
        raise ValueError(f"{path.name}: no 'Data:' heading above line {first}")
    columns = tuple(heading[1:])
    rows = tuple(tuple(line.split()) for line in lines[first - 1 : last])
    if len(rows) != observations or any(len(row) != len(columns) for row in rows):
        raise ValueError(f"{path.name}: expected {observations} rows of {len(columns)} values")
    for row in rows:
        for text in row:
            if not re.fullmatch(NUMBER, text):
                raise ValueError(f"{path.name}: {text!r} is not a number")
    return Dataset(
        name=path.stem,
        path=path,
        columns=columns,
        rows_text=rows,
        parameters=parameters,
        resid_sd=resid_sd,
        r2=r2,
        anova=anova,
        f_statistic=f_statistic,
    )

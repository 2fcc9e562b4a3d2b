"""Radial-velocity input: the validated :class:`RVData` record and its CSV reader.

A CSV file has a header line and the columns ``time`` (BJD_TDB [d], full Julian dates: an MJD
or a JD - 2450000 is refused), ``rv`` [m/s], ``rv_err`` [m/s] and, optionally, ``instrument``;
other columns are ignored. UTF-8 with or without a byte-order mark. Every problem is reported as
one sentence naming the file, the line (1-based, the header is line 1) and the column.
"""

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import RVDataError

__all__ = [
    "DEFAULT_INSTRUMENT",
    "EARLIEST_BJD",
    "MAX_RV_FILE_BYTES",
    "MAX_VELOCITIES",
    "MAX_VELOCITY_MS",
    "REQUIRED_COLUMNS",
    "RVData",
    "check_bjd",
    "check_file_size",
    "read_rv_csv",
    "separator_hint",
]

#: Instrument name given to every row of a file without an ``instrument`` column.
DEFAULT_INSTRUMENT = "default"
#: Columns every RV file must have.
REQUIRED_COLUMNS = ("time", "rv", "rv_err")


#: Times before this are refused in files: BJD 2,400,000 is 1858-11-16, before any precise
#: velocity; smaller values are times with an offset taken off (MJD, JD - 2450000).
EARLIEST_BJD = 2_400_000.0


#: Velocities and errors beyond this are refused in files [m/s]: the fastest stars known move
#: at a few hundred km/s (common practice), so 1000 km/s is a unit mistake.
MAX_VELOCITY_MS = 1.0e6

#: Largest RV file read [bytes] and most velocities per star: a star's record holds tens to a
#: few thousand velocities (about 40 bytes a line), so these are far above real use and keep a
#: mistaken file (a whole survey, a binary) from taking minutes and gigabytes to refuse.
MAX_RV_FILE_BYTES = 8_000_000
MAX_VELOCITIES = 20_000


def separator_hint(names):
    """Return a hint if a header's names look separated by semicolons or tabs, else "".

    Parameters
    ----------
    names : iterable of str
        The column names a comma-separated reader found.
    """
    header = ",".join(str(name) for name in names)
    for sep, kind in ((";", "semicolon"), ("\t", "tab")):
        if sep in header:
            return (f" (the header looks {kind}-separated: save the file with commas between "
                    "the columns and points as decimal marks)")
    return ""


def check_file_size(path, limit, what, fix="give one star's velocities per file"):
    """Refuse a file larger than ``limit`` bytes before reading it.

    Parameters
    ----------
    path : path-like
        The file (a missing file passes: its reader names it).
    limit : int
        Most bytes allowed.
    what : str
        What the file should be, for the sentence (``"an RV file"``).
    fix : str, optional
        How to fix it, the end of the sentence.

    Raises
    ------
    RVDataError
        If the file is larger.
    """
    try:
        size = Path(path).stat().st_size
    except OSError:
        return
    if size > limit:
        raise RVDataError(
            f"{path} is {size / 1e6:.1f} MB, more than the {limit / 1e6:g} MB allowed for "
            f"{what}: {fix}."
        )


def check_bjd(time, where):
    """Refuse times that are not full Julian dates (MJD or JD - 2450000 given by mistake).

    Parameters
    ----------
    time : ndarray, shape (n,)
        Times [d].
    where : callable
        ``where(i)`` names row ``i`` (file, line, column) for the sentence.

    Raises
    ------
    RVDataError
        At the first time before :data:`EARLIEST_BJD`.
    """
    low = np.flatnonzero(np.asarray(time, dtype=float) < EARLIEST_BJD)
    if low.size:
        i = int(low[0])
        raise RVDataError(
            f"{where(i)} holds {float(time[i])!r}, not a full Julian date: times must be BJD_TDB "
            "(about 2460000 in 2023); add 2400000.5 to an MJD or 2450000 to a JD-2450000."
        )


def _frozen(values, dtype):
    arr = np.array(values, dtype=dtype)
    arr.flags.writeable = False
    return arr


def _validate(time, rv, rv_err, instrument, where):
    """Check the arrays; ``where(i, column)`` names row ``i`` for the error sentence."""
    for column, values in (("time", time), ("rv", rv), ("rv_err", rv_err)):
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            raise RVDataError(
                f"{where(bad[0], column)} holds {float(values[bad[0]])!r}, not a finite number: "
                "replace it with a finite value or delete the row."
            )
    bad = np.flatnonzero(rv_err <= 0.0)
    if bad.size:
        raise RVDataError(
            f"{where(bad[0], 'rv_err')} holds {float(rv_err[bad[0]])!r}, but measurement errors "
            "must be positive: give the velocity's 1-sigma uncertainty in m/s."
        )
    empty = [i for i, name in enumerate(instrument) if not name.strip()]
    if empty:
        raise RVDataError(
            f"{where(empty[0], 'instrument')} is empty: name the instrument of every row, or "
            "drop the column to use a single instrument."
        )
    order = np.lexsort((time, instrument))
    same = (time[order][1:] == time[order][:-1]) & (instrument[order][1:] == instrument[order][:-1])
    if np.any(same):
        k = int(np.flatnonzero(same)[0])
        first, second = sorted((int(order[k]), int(order[k + 1])))
        raise RVDataError(
            f"{where(second, 'time')} repeats the time {time[second]!r} of {where(first, 'time')} "
            "for the same instrument: merge or remove the duplicate measurement."
        )


@dataclass(frozen=True, eq=False)
class RVData:
    """Validated radial velocities of one star.

    Attributes
    ----------
    time : ndarray, shape (n,)
        Times of the measurements, BJD_TDB [d].
    rv : ndarray, shape (n,)
        Radial velocities [m/s].
    rv_err : ndarray, shape (n,)
        1-sigma measurement errors [m/s], all positive.
    instrument : ndarray of str (object dtype), shape (n,)
        Instrument of each measurement.
    instruments : tuple of str
        Distinct instruments in order of first appearance.
    source : str
        File path or label the data came from (used in messages).
    """

    time: np.ndarray
    rv: np.ndarray
    rv_err: np.ndarray
    instrument: np.ndarray
    instruments: tuple
    source: str

    @classmethod
    def from_arrays(cls, time, rv, rv_err, instrument=None, source="arrays", _where=None):
        """Build and validate a record from arrays.

        Parameters
        ----------
        time : array_like, shape (n,)
            Times, BJD_TDB [d].
        rv : array_like, shape (n,)
            Radial velocities [m/s].
        rv_err : array_like, shape (n,)
            Measurement errors [m/s], positive.
        instrument : sequence of str, shape (n,), optional
            Instrument per row; every row gets ``"default"`` when omitted.
        source : str, optional
            Label used in error messages and kept on the record.

        Returns
        -------
        RVData

        Raises
        ------
        RVDataError
            If the arrays differ in length, hold non-finite values, non-positive errors, empty
            instrument names or repeated times for one instrument.
        """
        where = _where or (lambda i, column: f"{source}, row {i + 1}, column '{column}'")
        try:
            t = np.asarray(time, dtype=float).reshape(-1)
            v = np.asarray(rv, dtype=float).reshape(-1)
            s = np.asarray(rv_err, dtype=float).reshape(-1)
        except (TypeError, ValueError) as exc:
            raise RVDataError(
                f"{source}: time, rv and rv_err must be numbers ({exc}); pass numeric arrays."
            ) from None
        if instrument is None:
            instrument = [DEFAULT_INSTRUMENT] * t.size
        names = np.array([str(x) for x in instrument], dtype=object)
        if not (t.size == v.size == s.size == names.size):
            raise RVDataError(
                f"{source}: time, rv, rv_err and instrument have lengths {t.size}, {v.size}, "
                f"{s.size} and {names.size}; pass arrays of one length."
            )
        if t.size == 0:
            raise RVDataError(f"{source} holds no measurements: give at least one row of data.")
        _validate(t, v, s, names, where)
        instruments = tuple(dict.fromkeys(names.tolist()))
        return cls(
            time=_frozen(t, float),
            rv=_frozen(v, float),
            rv_err=_frozen(s, float),
            instrument=_frozen(names, object),
            instruments=instruments,
            source=str(source),
        )

    def __len__(self):
        return int(self.time.size)

    @property
    def instrument_index(self):
        """Ndarray of int, shape (n,): index of each row's instrument in `instruments`."""
        lookup = {name: k for k, name in enumerate(self.instruments)}
        return np.array([lookup[name] for name in self.instrument], dtype=np.intp)

    @property
    def digest(self):
        """Str: sha256 hex digest of the measurements (times, velocities, errors, instruments)."""
        h = hashlib.sha256()
        for arr in (self.time, self.rv, self.rv_err):
            h.update(np.ascontiguousarray(arr, dtype="<f8").tobytes())
        h.update("\x1f".join(self.instrument.tolist()).encode("utf-8"))
        return h.hexdigest()

    def concat(self, other):
        """Return a new record holding this record's rows followed by `other`'s.

        Parameters
        ----------
        other : RVData

        Returns
        -------
        RVData
            Validated again, so a time repeated for one instrument is refused.
        """
        return RVData.from_arrays(
            np.concatenate([self.time, other.time]),
            np.concatenate([self.rv, other.rv]),
            np.concatenate([self.rv_err, other.rv_err]),
            np.concatenate([self.instrument, other.instrument]),
            source=f"{self.source} + {other.source}",
        )


def _numeric_column(frame, column, path):
    import pandas as pd

    text = frame[column].astype(object)
    values = pd.to_numeric(text.where(text.str.strip() != "", None), errors="coerce")
    values = values.to_numpy(dtype=float, na_value=np.nan)
    bad = np.flatnonzero(np.isnan(values))
    for i in bad:
        raw = str(text.iloc[i]).strip()
        if raw.lower() != "nan":
            what = "is empty" if raw == "" else f"holds {raw!r}, which is not a number"
            raise RVDataError(
                f"{path}, line {int(frame.index[i]) + 2}, column '{column}' {what}: "
                "write a decimal number there."
            )
    return values


def read_rv_csv(path):
    """Read and validate one star's radial velocities from a CSV file.

    Parameters
    ----------
    path : str or path-like
        CSV file with a header line and the columns ``time`` (BJD_TDB [d]), ``rv`` [m/s],
        ``rv_err`` [m/s] and optionally ``instrument``; blank lines are skipped.

    Returns
    -------
    RVData

    Raises
    ------
    RVDataError
        With one sentence naming the file, line and column of the first problem.
    """
    import pandas as pd  # imported here: pandas is slow to import and only the reader needs it

    path = Path(path)
    check_file_size(path, MAX_RV_FILE_BYTES, "an RV file")
    try:
        frame = pd.read_csv(
            path, dtype=str, keep_default_na=False, skip_blank_lines=False, skipinitialspace=True,
            encoding="utf-8-sig",  # a spreadsheet's byte-order mark is not part of the header
        )
    except FileNotFoundError:
        raise RVDataError(f"{path} does not exist: check the file name and folder.") from None
    except pd.errors.EmptyDataError:
        raise RVDataError(
            f"{path} is empty: it needs a header line 'time,rv,rv_err' and data rows."
        ) from None
    except pd.errors.ParserError as exc:
        raise RVDataError(
            f"{path} is not a well-formed CSV table ({str(exc).strip()}): give every line the "
            "same number of comma-separated fields as the header."
        ) from None
    except UnicodeDecodeError:
        raise RVDataError(f"{path} is not UTF-8 text: save it as a plain UTF-8 CSV file.") from None
    names = [str(c).strip().lower() for c in frame.columns]
    # pandas renames a repeated header name 'time' to 'time.1'; spacing or case can repeat too.
    bases = [n.rsplit(".", 1)[0] if n.rsplit(".", 1)[-1].isdigit() else n for n in names]
    twice = [n for n in bases if bases.count(n) > 1]
    if twice:
        raise RVDataError(
            f"{path}, line 1 (header) names the column '{twice[0]}' more than once: give each "
            "column once."
        )
    frame.columns = names
    for column in REQUIRED_COLUMNS:
        if column not in frame.columns:
            hint = separator_hint(frame.columns)
            raise RVDataError(
                f"{path}, line 1 (header) has no column '{column}': the header must name the "
                f"columns time, rv, rv_err (and optionally instrument){hint}."
            )
    if not isinstance(frame.index, pd.RangeIndex):  # pandas took the extra fields as an index
        raise RVDataError(
            f"{path} has lines with more comma-separated fields than its header "
            f"({len(frame.columns)}): give every line the same number of fields as the header."
        )
    frame = frame.astype(object)
    blank = frame.apply(lambda row: all(str(x).strip() == "" for x in row), axis=1)
    frame = frame.loc[~blank.to_numpy(dtype=bool)] if len(frame) else frame
    if len(frame) == 0:
        raise RVDataError(f"{path} has a header but no data rows: add the measurements.")
    if len(frame) > MAX_VELOCITIES:
        raise RVDataError(
            f"{path} holds {len(frame)} velocities, more than the {MAX_VELOCITIES} allowed for "
            "one star: give one star's velocities per file."
        )
    values = {c: _numeric_column(frame, c, path) for c in REQUIRED_COLUMNS}
    instrument = None
    if "instrument" in frame.columns:
        instrument = [str(x).strip() for x in frame["instrument"]]
    lines = frame.index.to_numpy() + 2
    data = RVData.from_arrays(
        values["time"],
        values["rv"],
        values["rv_err"],
        instrument,
        source=str(path),
        _where=lambda i, column: f"{path}, line {int(lines[i])}, column '{column}'",
    )
    check_bjd(values["time"], lambda i: f"{path}, line {int(lines[i])}, column 'time'")
    for column in ("rv", "rv_err"):
        big = np.flatnonzero(np.abs(values[column]) > MAX_VELOCITY_MS)
        if big.size:
            i = int(big[0])
            value = float(values[column][i])
            raise RVDataError(
                f"{path}, line {int(lines[i])}, column '{column}' holds {value!r}: "
                f"more than {MAX_VELOCITY_MS:g} m/s (1000 km/s), beyond any star's velocity; "
                "give velocities and errors in m/s."
            )
    return data

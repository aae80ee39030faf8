"""The study folder: locating and reading the data files, mapping columns, validating the data.

``load_study`` returns a :class:`Study` or raises :class:`~auditor.errors.StudyInputError` carrying
every problem found. ``outcome_data`` turns the visit-level rows of one outcome into one row per
participant (baseline, screening, each follow-up visit, arm, endpoint, covariates) for the checks.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputProblem, ProblemLog, StudyInputError, did_you_mean, rows_text
from .metadata import DEFAULT_MAX_ROWS, METADATA_FILE, OutcomeSpec, StudyMetadata, read_metadata
from .records import flag_column, flag_names, outcome_unit, select_outcome_records
from .results import InputFile

MAX_FILE_BYTES = 2 * 1024**3
DERIVED_COLUMNS = ("BASE", "CHG", "PCHG")
ARM_DEFAULTS = ("TRTP", "TRT01P", "TRTA", "TRT01A", "ARM")
TRUE_CODES = {"1", "1.0", "y", "yes", "true", "t"}
FALSE_CODES = {"0", "0.0", "n", "no", "false", "f"}
MISSING_ID_TEXT = {"na", "nan", "n/a", "null", "none", "."}
"""Identifier cells that a spreadsheet or an export wrote for "missing"; never a real participant."""
MAX_ARM_MESSAGES = 5
"""Unknown arm labels reported one by one; beyond this they are counted (a mapped column that is not
the arm would otherwise give one line per participant)."""
MIN_PER_ARM = 2
"""Participants an arm needs before anything is compared with it."""
DELIMITERS = ((";", "semicolons"), ("\t", "tabs"), ("|", "vertical bars"))
POOLED_ARM = "(pooled)"
"""The one arm label of a blinded study that declares no arms and whose data carry none: every
participant is in it, and no comparison between arms is made."""


@dataclass
class Study:
    """A validated study folder, ready for the checks."""

    folder: Path
    metadata: StudyMetadata
    metadata_sha256: str
    visits: pd.DataFrame
    """Long rows: subject, arm, param, visit (string), value (float)."""
    participants: pd.DataFrame
    """One row per participant: subject, arm, plus the endpoint and covariate columns."""
    files: list[InputFile]
    derived_columns: list[str]
    warnings: list[InputProblem] = field(default_factory=list)
    outcome_files: dict[str, str] = field(default_factory=dict)
    """The visit file each outcome's parameter is read from."""
    record_selection: dict[str, list] = field(default_factory=dict)
    """Per outcome parameter, the :class:`~auditor.records.RuleCount` of each record rule applied."""
    units: dict[str, str] = field(default_factory=dict)
    """Per outcome parameter, its unit (declared, else the data's AVALU)."""


@dataclass
class OutcomeData:
    """One outcome's data, one row per participant.

    ``frame`` columns: ``subject``, ``arm``, ``baseline``, ``screening`` (if a screening visit is
    named), ``followup`` (the main follow-up visit), ``fu:<visit>`` for every follow-up visit,
    ``event`` (the risk endpoint, if named), ``baseline_time`` and ``followup_time`` (a count's
    observation times, if ``exposure`` is named) and each covariate by its own name.
    """

    spec: OutcomeSpec
    frame: pd.DataFrame
    arms: list[str]
    control_arm: str | None
    design: str
    derived_columns: list[str]


# --------------------------------------------------------------------------- files


def _inside(folder: Path, rel: str, key: str, log: ProblemLog) -> Path | None:
    """Resolve a metadata path; refuse absolute paths and anything that leaves the folder.

    The path is resolved with every symbolic link followed, so a link inside the folder that points
    outside it is refused like ``../``.
    """
    if any(ord(ch) < 32 for ch in rel):
        log.add(METADATA_FILE, key, "-", f"path '{rel}' contains a control character",
                "give a plain relative path such as data/adeff.csv")
        return None
    if Path(rel).is_absolute() or rel.startswith(("/", "\\")) or (len(rel) > 1 and rel[1] == ":"):
        log.add(METADATA_FILE, key, "-", f"path '{rel}' is absolute",
                "give the path relative to the study folder")
        return None
    try:
        root = folder.resolve()
        target = (folder / rel).resolve()
    except (OSError, RuntimeError, ValueError):  # a link loop, or a name the system refuses
        log.add(METADATA_FILE, key, "-", f"path '{rel}' cannot be resolved (a link loop?)",
                "point it at the data file itself")
        return None
    if target != root and root not in target.parents:
        log.add(METADATA_FILE, key, "-", f"path '{rel}' leaves the study folder",
                "keep data files inside the study folder (links that point outside are refused)")
        return None
    if target.is_dir():
        log.add(METADATA_FILE, key, "-", f"path '{rel}' is a folder, not a file",
                "name the data file itself")
        return None
    if not target.exists():
        log.add(METADATA_FILE, key, "-", f"file '{rel}' does not exist",
                "correct the path or add the file")
        return None
    if not target.is_file():
        log.add(METADATA_FILE, key, "-", f"path '{rel}' is not a regular file",
                "copy the data into an ordinary file inside the study folder")
        return None
    return target


UTF32_BOMS = (b"\xff\xfe\x00\x00", b"\x00\x00\xfe\xff")
UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
BINARY_HEAD_BYTES = 65536
"""A NUL byte this early means the file is not text at all; later, a text file with a binary tail."""
_UTF8_MULTIBYTE = re.compile(
    rb"[\xc2-\xdf][\x80-\xbf]|\xe0[\xa0-\xbf][\x80-\xbf]|[\xe1-\xec\xee\xef][\x80-\xbf]{2}"
    rb"|\xed[\x80-\x9f][\x80-\xbf]|\xf0[\x90-\xbf][\x80-\xbf]{2}|[\xf1-\xf3][\x80-\xbf]{3}"
    rb"|\xf4[\x80-\x8f][\x80-\xbf]{2}")
"""One well-formed multi-byte UTF-8 sequence (RFC 3629, section 4): text that holds one was written
as UTF-8, since Latin-1 text almost never pairs a lead byte with continuation bytes."""
_SEP_LINE = re.compile(rb'^(?:\xef\xbb\xbf)?"?sep=(.)"?\r?$', re.IGNORECASE)
"""The ``sep=<c>`` first line a spreadsheet writes to name a CSV file's delimiter."""
XPT_RECORD = 80
XPT_LIBRARY = b"HEADER RECORD*******LIBRARY HEADER RECORD!!!!!!!"
XPT_LIBRARY_V8 = b"HEADER RECORD*******LIBV8   HEADER RECORD!!!!!!!"
XPT_MEMBER = b"HEADER RECORD*******MEMBER  HEADER RECORD!!!!!!!"
XPT_NAMESTR = b"HEADER RECORD*******NAMESTR HEADER RECORD!!!!!!!"
XPT_OBS = b"HEADER RECORD*******OBS     HEADER RECORD!!!!!!!"
XPT_MISSING_LEADS = frozenset(b"._ABCDEFGHIJKLMNOPQRSTUVWXYZ")
"""First byte of a SAS missing value (``.``, ``._``, ``.A`` to ``.Z``) in a transport file."""


def _row_of(raw: bytes, offset: int) -> int:
    """The 1-based line of the file (header = row 1) that holds byte ``offset``."""
    return raw.count(b"\n", 0, offset) + 1


def _text_bytes(raw: bytes, label: str, log: ProblemLog) -> tuple[bytes, str] | None:
    """The CSV bytes and the codec pandas should read them with.

    UTF-32 and UTF-16 (named by their byte-order marks; UTF-32 first, since the UTF-16 LE mark is a
    prefix of UTF-32 LE's) are decoded and handed on as UTF-8, so that every later check sees one
    byte per ASCII character. Otherwise the bytes are UTF-8 when they decode as such, UTF-8 with
    damage when they hold UTF-8 sequences and invalid bytes (refused, naming the first bad byte), and
    else Latin-1, which decodes any byte.
    """
    for boms, codec in ((UTF32_BOMS, "utf-32"), (UTF16_BOMS, "utf-16")):
        if raw.startswith(boms):
            try:
                raw = raw.decode(codec).encode("utf-8")
            except UnicodeDecodeError as exc:
                log.add(label, "-", "-", f"starts with a {codec.upper()} byte-order mark but is not valid "
                        f"{codec.upper()} text (at byte {exc.start})", "save the file again as UTF-8")
                return None
            return (raw, "utf-8") if _no_nul_bytes(raw, label, log) else None
    if not _no_nul_bytes(raw, label, log):
        return None
    try:
        raw.decode("utf-8")
        return raw, "utf-8-sig"
    except UnicodeDecodeError as exc:
        if _UTF8_MULTIBYTE.search(raw) is None:
            return raw, "latin-1"
        log.add(label, f"row {_row_of(raw, exc.start)}", "-",
                f"is UTF-8 text with a damaged byte: byte 0x{raw[exc.start]:02X} is not valid UTF-8",
                "save the file again as UTF-8 (correct or retype the character on that row)")
        return None


def _no_nul_bytes(raw: bytes, label: str, log: ProblemLog) -> bool:
    """Refuse a file holding a NUL byte anywhere: text never does, and pandas would otherwise parse
    a long binary tail whole. The row of the first NUL is named."""
    first = raw.find(b"\x00")
    if first < 0:
        return True
    where = f"row {_row_of(raw, first)}"
    if first < BINARY_HEAD_BYTES:
        log.add(label, where, "-", "is not a text file (it holds binary data; the first NUL byte is on this row)",
                "export the data as CSV, Parquet or SAS transport (.xpt)")
    else:
        log.add(label, where, "-", "is not a text file from this row on (NUL bytes, i.e. binary data, "
                "follow the text)", "export the file again, or cut it after the last data row")
    return False


def _without_sep_line(raw: bytes, label: str, log: ProblemLog) -> bytes | None:
    """A spreadsheet's ``sep=,`` first line removed (and recorded, so that row numbers still match
    the file's lines); ``sep=`` with another delimiter refused."""
    end = raw.find(b"\n")
    first = raw if end < 0 else raw[:end]
    m = _SEP_LINE.match(first)
    if m is None:
        return raw
    sep = m.group(1).decode("latin-1")
    if sep != ",":
        name = dict(DELIMITERS).get(sep, f"'{sep}'")
        log.add(label, "row 1", "-", f"the first line 'sep={sep}' says columns are separated by {name}, "
                "not commas", "save it as comma-separated CSV (a spreadsheet's CSV UTF-8 format)")
        return None
    log.skip_lines(label, 1)
    return b"" if end < 0 else raw[end + 1:]


def _csv_rows_within(raw: bytes, label: str, max_rows: int, log: ProblemLog) -> bool:
    """Refuse a CSV with more lines than the row limit allows, counted before it is parsed (each
    data row takes at least one line; the header takes one)."""
    lines = raw.count(b"\n") + (0 if raw.endswith(b"\n") else 1)
    if lines - 1 <= max_rows:
        return True
    _too_many_rows(label, f"{lines - 1:,} lines after the header", max_rows, log)
    return False


def _too_many_rows(label: str, found: str, max_rows: int, log: ProblemLog) -> None:
    log.add(label, "-", "-", f"has {found}, more than the limit of {max_rows:,} rows",
            f"split the data or drop unused parameters, or raise the limit with max_rows = "
            f"{max_rows * 2} (say) under [files] in study.toml")


def read_table(path: Path, label: str, log: ProblemLog, max_rows: int = DEFAULT_MAX_ROWS) -> pd.DataFrame | None:
    """Read a CSV, Parquet or SAS transport file into a DataFrame of the file's own columns.

    Every failure becomes a problem in ``log`` naming the file (and the row where the parser says),
    never an exception. A file with more than ``max_rows`` data rows is refused before it is parsed.
    """
    try:
        size = path.stat().st_size
        if size == 0:
            log.add(label, "-", "-", "is empty", "export the data again")
            return None
        if size > MAX_FILE_BYTES:
            log.add(label, "-", "-", "is larger than 2 GiB", "split the study or remove unused parameters")
            return None
        suffix = path.suffix.lower()
        if suffix == ".parquet":
            df = _read_parquet(path, label, max_rows, log)
        elif suffix == ".xpt":
            df = _read_xpt(path.read_bytes(), label, max_rows, log)
        elif suffix in (".csv", ".txt"):
            df = _read_csv(path.read_bytes(), label, log, max_rows)
        else:
            log.add(label, "-", "-", f"has an unsupported type '{suffix}'",
                    "use .csv, .parquet or .xpt")
            return None
    except PermissionError:
        log.add(label, "-", "-", "cannot be read (permission denied)", "check the file permissions")
        return None
    except Exception as exc:  # malformed files of any format
        detail = str(exc).replace(str(path), label).replace(str(path.parent), "")
        log.add(label, "-", "-", f"cannot be parsed ({type(exc).__name__}: {detail[:160]})",
                "export the file again in a supported format")
        return None
    return None if df is None else _checked_columns(df, label, log)


def _read_parquet(path: Path, label: str, max_rows: int, log: ProblemLog) -> pd.DataFrame | None:
    """A Parquet file, refused unread when its footer declares more than ``max_rows`` rows (a few
    megabytes of repeated values can expand to tens of millions of rows)."""
    import pyarrow.parquet as pq

    rows = pq.ParquetFile(path).metadata.num_rows
    if rows > max_rows:
        _too_many_rows(label, f"{rows:,} rows", max_rows, log)
        return None
    return pd.read_parquet(path)


# --------------------------------------------------------------------------- SAS transport


@dataclass(frozen=True)
class XptVariable:
    """One variable of a transport file's member, from its NAMESTR record."""

    name: str
    numeric: bool
    length: int
    position: int
    """Offset of the variable within an observation."""


@dataclass(frozen=True)
class XptLayout:
    """Where the first member's observations lie in a SAS transport (version 5) file."""

    variables: tuple[XptVariable, ...]
    record_length: int
    """Bytes per observation: the sum of the variables' lengths."""
    data_start: int
    data_end: int
    """End of the observations: the next member's header, or the end of the file."""

    @property
    def observations(self) -> int:
        """Complete observations in the data area (trailing blank padding may add a few blank ones
        when observations are shorter than a record; never fewer than the file holds)."""
        return (self.data_end - self.data_start) // self.record_length


class XptStructureError(ValueError):
    """The file does not have the record structure of a SAS transport file."""


def _xpt_layout(raw: bytes) -> XptLayout:
    """The first member's variables and observation area, read from the header records.

    Layout (SAS transport format, version 5): 80-byte records; a library header, a member header whose
    last digits give the NAMESTR length (140, or 136 from VAX/VMS), a NAMESTR header with the number of
    variables in columns 55-58, one NAMESTR per variable (big-endian: type at 0, length at 4, name at 8,
    position at 84) padded to whole records, then an OBS header and the observations.
    """
    if raw.startswith(XPT_LIBRARY_V8):
        raise XptStructureError("it is a version 8 transport file; only version 5 is read")
    if not raw.startswith(XPT_LIBRARY):
        raise XptStructureError("it does not start with a SAS transport library header")
    member = 3 * XPT_RECORD
    if raw[member:member + len(XPT_MEMBER)] != XPT_MEMBER:
        raise XptStructureError("the member header is not where the format puts it")
    namestr_len = int(raw[member + 74:member + 78])
    names_head = member + 4 * XPT_RECORD
    if raw[names_head:names_head + len(XPT_NAMESTR)] != XPT_NAMESTR:
        raise XptStructureError("the variable list header is not where the format puts it")
    count = int(raw[names_head + 54:names_head + 58])
    start = names_head + XPT_RECORD
    variables = tuple(_xpt_variable(raw[start + i * namestr_len:start + (i + 1) * namestr_len])
                      for i in range(count))
    obs_head = start + -(-count * namestr_len // XPT_RECORD) * XPT_RECORD
    if raw[obs_head:obs_head + len(XPT_OBS)] != XPT_OBS:
        raise XptStructureError("the observation header does not follow the variable list")
    data_start = obs_head + XPT_RECORD
    record_length = sum(v.length for v in variables)
    if count == 0 or record_length == 0:
        raise XptStructureError("it declares no variables")
    return XptLayout(variables, record_length, data_start, _xpt_data_end(raw, data_start))


def _xpt_variable(namestr: bytes) -> XptVariable:
    """One NAMESTR record: type 1 is numeric, 2 character."""
    if len(namestr) < 88:
        raise XptStructureError("a variable description is cut short")
    kind, length = int.from_bytes(namestr[0:2], "big"), int.from_bytes(namestr[4:6], "big")
    if kind not in (1, 2) or length == 0 or (kind == 1 and not 2 <= length <= 8):
        raise XptStructureError("a variable description is not valid")
    return XptVariable(namestr[8:16].decode("latin-1").strip(), kind == 1, length,
                       int.from_bytes(namestr[84:88], "big"))


def _xpt_data_end(raw: bytes, data_start: int) -> int:
    """Where the first member's observations end: a following member header on a record boundary,
    or the end of the file."""
    at = raw.find(XPT_MEMBER, data_start)
    while at >= 0 and (at - data_start) % XPT_RECORD:
        at = raw.find(XPT_MEMBER, at + 1)
    return len(raw) if at < 0 else at


def _xpt_cut_at(raw: bytes, layout: XptLayout) -> int | None:
    """The byte at which a transport file appears cut short, or None when it is whole.

    A whole file is a sequence of 80-byte records, and its observation area holds whole observations
    followed by fewer than 80 bytes of blank padding. (A file cut exactly after an observation that
    ends on a record boundary cannot be told from a whole one: version 5 records no count.)
    """
    if len(raw) % XPT_RECORD:
        return len(raw)
    used = layout.data_start + layout.observations * layout.record_length
    tail = raw[used:layout.data_end]
    if len(tail) >= XPT_RECORD or tail.strip(b" "):
        return layout.data_end
    return None


def _read_xpt(raw: bytes, label: str, max_rows: int, log: ProblemLog) -> pd.DataFrame | None:
    """A SAS transport file: its structure checked (truncation, row limit) before pandas decodes it,
    then its IBM zeros set to exactly zero."""
    try:
        layout = _xpt_layout(raw)
    except (XptStructureError, ValueError, IndexError) as exc:
        reason = str(exc) if isinstance(exc, XptStructureError) else "its header records are not valid"
        if len(raw) < 10 * XPT_RECORD and raw.startswith(XPT_LIBRARY):
            reason = f"it ends at byte {len(raw)}, inside the header records"
        log.add(label, "-", "-", f"cannot be parsed as a SAS transport file ({reason})",
                "export the file again as SAS transport version 5 (.xpt)")
        return None
    cut = _xpt_cut_at(raw, layout)
    if cut is not None:
        log.add(label, "-", "-", "is incomplete: its last observation is cut short",
                f"export the file again; it appears cut short at byte {cut}")
        return None
    if layout.observations > max_rows:
        _too_many_rows(label, f"{layout.observations:,} observations", max_rows, log)
        return None
    df = pd.read_sas(io.BytesIO(raw), format="xport", encoding="latin-1")
    return _with_exact_zeros(df, raw, layout)


def _with_exact_zeros(df: pd.DataFrame, raw: bytes, layout: XptLayout) -> pd.DataFrame:
    """Numeric cells stored as an IBM zero (every byte after the first zero, the first 0x00 or its
    sign bit 0x80) set to 0.0.

    pandas' decoder turns that pattern into 5.397605e-79, which makes a valid ordinal 0 unknown and a
    percent change from 0 enormous. Missing values (first byte ``.``, ``_`` or a letter) stay missing.
    """
    n = min(len(df), layout.observations)
    if n == 0:
        return df
    obs = np.frombuffer(raw, dtype=np.uint8, count=n * layout.record_length,
                        offset=layout.data_start).reshape(n, layout.record_length)
    for j, var in enumerate(layout.variables):
        if not var.numeric or j >= df.shape[1]:
            continue
        cells = obs[:, var.position:var.position + var.length]
        zero = (cells[:, 1:] == 0).all(axis=1) & ((cells[:, 0] == 0x00) | (cells[:, 0] == 0x80))
        if zero.any():
            column = df.iloc[:, j].to_numpy(dtype=float, copy=True)
            column[:n][zero] = 0.0
            df.isetitem(j, column)
    return df


# --------------------------------------------------------------------------- CSV


def _checked_columns(df: pd.DataFrame, label: str, log: ProblemLog) -> pd.DataFrame | None:
    """Column names stripped of spaces; refuse a file with no data rows or a repeated column name."""
    df.columns = [str(c).strip() for c in df.columns]
    if df.empty:
        log.add(label, "-", "-", "has a header but no data rows", "export the data again")
        return None
    dup = sorted({c for c in df.columns if list(df.columns).count(c) > 1})
    if dup:
        log.add(label, "row 1", dup[0], "column name appears more than once", "rename the duplicate column")
        return None
    return df


def _read_csv(raw: bytes, label: str, log: ProblemLog, max_rows: int = DEFAULT_MAX_ROWS) -> pd.DataFrame | None:
    """A CSV file as text cells. The whole file is screened before it is parsed (encoding, NUL bytes,
    a ``sep=`` line, the row limit), and the header is examined first, so that a wrong delimiter, a
    binary file or a repeated column name is named as such rather than as a parser failure."""
    decoded = _text_bytes(raw, label, log)
    if decoded is None:
        return None
    raw, encoding = decoded
    raw = _without_sep_line(raw, label, log)
    if raw is None or not _csv_rows_within(raw, label, max_rows, log):
        return None
    header = _header_cells(raw[:1 << 20].decode(encoding, errors="replace"))
    if header is None:
        log.add(label, "-", "-", "has no header row (only blank lines)", "export the data again")
        return None
    if not _header_ok(header, label, log):
        return None
    try:
        return pd.read_csv(io.BytesIO(raw), encoding=encoding, dtype=str, keep_default_na=False,
                           na_values=[""])
    except pd.errors.ParserError as exc:
        where, problem = _parser_problem(str(exc))
        log.add(label, where, "-", problem, "check the quoting and the number of cells on that row, "
                "or export the file again")
        return None


def _header_cells(text: str) -> list[str] | None:
    """The first non-blank row of a CSV text, split on commas (quotes respected)."""
    for cells in csv.reader(io.StringIO(text)):
        if any(c.strip() for c in cells):
            return cells
    return None


def _header_ok(cells: list[str], label: str, log: ProblemLog) -> bool:
    """Refuse a header that another delimiter separates, or that repeats a column name."""
    line = ",".join(cells)
    for sep, name in DELIMITERS:
        if line.count(sep) > max(len(cells) - 1, 0):
            log.add(label, "row 1", "-", f"uses {name} between columns, not commas",
                    "save it as comma-separated CSV")
            return False
    names = [c.strip() for c in cells]
    dup = sorted({c for c in names if names.count(c) > 1 and c})
    if dup:
        log.add(label, "row 1", dup[0], "column name appears more than once", "rename the duplicate column")
        return False
    return True


def _parser_problem(message: str) -> tuple[str, str]:
    """The row and the plain-words problem from a pandas CSV parser message."""
    m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if m:
        return f"row {m.group(2)}", f"has {m.group(3)} cells where the header has {m.group(1)}"
    m = re.search(r"EOF inside string starting at row (\d+)", message)
    if m:
        return f"row {int(m.group(1)) + 1}", "a quoted cell that starts on this row is never closed"
    return "-", f"cannot be parsed as CSV ({message.strip()[:160]})"


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# --------------------------------------------------------------------------- columns


def _need_column(df: pd.DataFrame, col: str, label: str, key: str, log: ProblemLog) -> bool:
    if col in df.columns:
        return True
    log.add(label, "row 1", col, "required column is missing",
            f"add it, or map it in study.toml [columns] {key} = ... ({did_you_mean(col, df.columns)})")
    return False


def _arm_column(df: pd.DataFrame, explicit: str | None) -> str | None:
    if explicit:
        return explicit if explicit in df.columns else None
    return next((c for c in ARM_DEFAULTS if c in df.columns), None)


def _as_numbers(series: pd.Series, label: str, column: str, log: ProblemLog,
                what: str = "value") -> pd.Series:
    """Numeric conversion that reports non-numeric and infinite cells by row instead of failing."""
    if pd.api.types.is_numeric_dtype(series):
        values = series.astype(float)
        bad_text = pd.Series(False, index=series.index)
    else:
        text = series.astype("string").str.strip()
        values = pd.to_numeric(text, errors="coerce").astype(float)
        bad_text = text.notna() & values.isna() & ~text.str.lower().isin(["nan", "na", "."])
        nan_text = text.str.lower().isin(["nan"])
        if nan_text.any():
            log.add(label, rows_text(np.flatnonzero(nan_text)), column, f"{what} is the text 'NaN'",
                    "leave missing values empty")
    if bad_text.any():
        pos = np.flatnonzero(bad_text.to_numpy())
        example = str(series.iloc[pos[0]])[:40]
        log.add(label, rows_text(pos), column, f"{what} is not a number (e.g. '{example}')",
                "correct the cell or leave it empty if missing")
    inf = np.isinf(values.to_numpy())
    if inf.any():
        log.add(label, rows_text(np.flatnonzero(inf)), column, f"{what} is infinite",
                "correct the cell or leave it empty if missing")
        values = values.where(~np.isinf(values), np.nan)
    return values


def _visit_key(v) -> str:
    if isinstance(v, float) and v.is_integer():
        v = int(v)
    return str(v).strip()


def _visit_number_key(v) -> str:
    """A visit-number cell as text, numbers written as :func:`_visit_key` writes them, so that the
    cell ``4.0`` (a SAS export) matches the visit ``4`` of study.toml."""
    text = str(v).strip()
    try:
        number = float(text)
    except ValueError:
        return text
    return _visit_key(number) if math.isfinite(number) else text


def _keys(series: pd.Series, key) -> pd.Series:
    """``key`` applied to each distinct non-empty cell (fast on a million rows of a few visits)."""
    text = series.astype("string").str.strip()
    text = text.where(text != "", pd.NA)
    mapping = {u: key(u) for u in text.dropna().unique()}
    return text.map(mapping).astype("string")


def _among(series: pd.Series, values) -> np.ndarray:
    """``series.isin(values)`` as a boolean array, by hashing (fast for a million text cells; the
    Arrow-backed string ``isin`` of pandas converts every value one by one)."""
    pool = pd.unique(pd.Series(values, dtype=object).dropna())
    return series.astype(object).isin(pool).to_numpy(dtype=bool)


def _check_ids(ids: pd.Series, label: str, column: str, log: ProblemLog) -> None:
    """Participant identifiers must be present and must not be the text of a missing value."""
    missing = ids.isna() | (ids == "")
    if missing.any():
        log.add(label, rows_text(np.flatnonzero(missing.to_numpy())), column, "participant identifier is empty",
                "fill in the identifier or drop the row")
    na_text = ids.str.lower().isin(MISSING_ID_TEXT).fillna(False)
    if na_text.any():
        pos = np.flatnonzero(na_text.to_numpy())
        log.add(label, rows_text(pos), column, f"participant identifier is the missing-value text "
                f"'{ids.iloc[pos[0]]}'", "fill in the identifier or drop the row")


# --------------------------------------------------------------------------- loading


def load_study(folder: str | Path, metadata: bytes | None = None) -> Study:
    """Read and validate a study folder. Raises StudyInputError with every problem found.

    A permission refused anywhere on the way (the folder, a sub-folder, a file) is an input problem
    naming the path, never an internal error: the user can mend it, the tool cannot. ``metadata``:
    the bytes of a study.toml to use instead of the folder's (a draft not yet written).
    """
    try:
        return _load_study_folder(Path(folder), metadata)
    except PermissionError as exc:
        raise StudyInputError([_permission_problem(Path(folder), exc)]) from None


def _permission_problem(folder: Path, exc: PermissionError) -> InputProblem:
    """The refused path, relative to the study folder when inside it, as a one-line problem."""
    refused = Path(exc.filename) if exc.filename else folder
    shown = str(refused)
    for base in (folder, folder.resolve()):
        if refused != base and refused.is_relative_to(base):
            shown = refused.relative_to(base).as_posix()
            break
    return InputProblem(shown, "-", "-", "cannot be read (permission denied)",
                        "give read permission on it and search permission on the folders above it")


def _load_study_folder(folder: Path, metadata: bytes | None = None) -> Study:
    """:func:`load_study` without the translation of refused permissions."""
    log = ProblemLog()
    if not folder.is_dir():
        log.add(str(folder), "-", "-", "is not a folder", "give the path of a study folder")
        log.raise_if_errors()
    meta, meta_hash = read_metadata(folder, log, metadata)
    if meta is None:
        log.raise_if_errors()
    files: list[InputFile] = []
    visit_files = meta.files.visit_files
    paths = {f: _inside(folder, f, "files.visits" if len(visit_files) == 1 else f"files.visits[{i}]", log)
             for i, f in enumerate(visit_files)}
    part_path = (_inside(folder, meta.files.participants, "files.participants", log)
                 if meta.files.participants else None)
    log.raise_if_errors()

    raws = {f: read_table(paths[f], f, log, meta.files.max_rows) for f in visit_files}
    raw_part = None
    if part_path is not None:
        raw_part = read_table(part_path, meta.files.participants, log, meta.files.max_rows)
    log.raise_if_errors()

    for f in visit_files:
        files.append(InputFile("visits", f, _sha256(paths[f]), int(len(raws[f]))))
    if part_path is not None:
        files.append(InputFile("participants", meta.files.participants, _sha256(part_path),
                               int(len(raw_part))))

    if meta.files.layout == "wide":
        long = _wide_to_long(raws[visit_files[0]], meta, visit_files[0], log)
    else:
        long = _normalise_long(raws[visit_files[0]], meta, visit_files[0], log)
        if len(visit_files) > 1:
            long = _stacked([long] + [_normalise_long(raws[f], meta, f, log) for f in visit_files[1:]],
                            visit_files)
    if not long.empty and "file" not in long.columns:
        long["file"] = visit_files[0]
    participants = _participants(raw_part, long, meta, log)
    log.raise_if_errors()

    arm_col = _arm_column(raw_part if raw_part is not None else raws[visit_files[0]], meta.columns.arm)
    if not _pooled_without_arms(meta, participants):
        _check_arms(long, participants, meta, arm_col, log)
    outcome_files = _outcome_files(long, meta, log)
    long, selection, units = _selected_records(long, raw_part, outcome_files, meta, log,
                                               {f: set(raws[f].columns) for f in visit_files})
    by_file = _records_by_file(long, {outcome_files.get(spec.param, visit_files[0]) for spec in meta.outcomes})
    for i, spec in enumerate(meta.outcomes):
        label = outcome_files.get(spec.param, visit_files[0])
        frame, positions = by_file[label]
        rows = frame.iloc[positions[spec.param]] if spec.param in positions else frame.iloc[:0]
        _check_outcome(frame, participants, spec, i, meta, label, log, rows)
        _check_entry_conditions(long, spec, i, log)
    log.raise_if_errors()

    meta = _with_data_units(meta, units)
    derived = sorted(c for c in DERIVED_COLUMNS if any(c in raw.columns for raw in raws.values()))
    return Study(folder=folder, metadata=meta, metadata_sha256=meta_hash, visits=long,
                 participants=participants, files=files, derived_columns=derived,
                 warnings=log.warnings, outcome_files=outcome_files, record_selection=selection,
                 units=units)


def _with_data_units(meta: StudyMetadata, units: dict[str, str]) -> StudyMetadata:
    """The metadata with each outcome's unit taken from the data (AVALU) where study.toml gives none."""
    outcomes = [o.model_copy(update={"unit": units[o.param]}) if not o.unit and units.get(o.param) else o
                for o in meta.outcomes]
    return meta.model_copy(update={"outcomes": outcomes})


def _stacked(pieces: list[pd.DataFrame], labels: list[str]) -> pd.DataFrame:
    """The long frames of several visit files as one, each row tagged with its file (row numbers stay
    those of its own file)."""
    kept = [p.assign(file=label) for p, label in zip(pieces, labels) if not p.empty]
    if not kept:
        return pd.DataFrame()
    out = pd.concat(kept, ignore_index=True)
    for col in ("subject", "param", "visit", "visit_number", "arm", "file"):
        if col in out.columns:
            out[col] = out[col].astype("string")
    return out


def _pooled_without_arms(meta: StudyMetadata, participants: pd.DataFrame) -> bool:
    """A blinded study declaring no arms, whose data carry no arm: pooled, nothing to check by arm."""
    return (meta.study.blinded and not meta.study.arms and not participants.empty
            and (participants["arm"] == POOLED_ARM).all())


def _files_of_params(long: pd.DataFrame) -> dict[str, list[str]]:
    """The visit files holding each parameter, sorted: from the distinct (parameter, file) pairs, so
    that the work grows with the pairs rather than with a Python call per parameter group."""
    pairs = long[["param", "file"]].dropna().drop_duplicates()
    present: dict[str, set] = {}
    for param, file in zip(pairs["param"].tolist(), pairs["file"].tolist()):
        present.setdefault(param, set()).add(file)
    return {param: sorted(files) for param, files in present.items()}


def _outcome_files(long: pd.DataFrame, meta: StudyMetadata, log: ProblemLog) -> dict[str, str]:
    """The visit file of each outcome: ``outcomes.file`` when given, else the one file holding its
    parameter; a parameter in several files without ``file`` is refused (which one is meant?)."""
    out: dict[str, str] = {}
    if long.empty:
        return out
    present = _files_of_params(long)
    for i, spec in enumerate(meta.outcomes):
        holders = present.get(spec.param, [])
        if spec.file is not None:
            out[spec.param] = spec.file
            if holders and spec.file not in holders:
                log.add(METADATA_FILE, f"outcomes[{i}].file", meta.columns.param,
                        f"parameter '{spec.param}' is not in '{spec.file}' (it is in {', '.join(holders)})",
                        "correct file, or the parameter code")
        elif len(holders) > 1:
            log.add(METADATA_FILE, f"outcomes[{i}].file", meta.columns.param,
                    f"parameter '{spec.param}' is in more than one visit file: {', '.join(holders)}",
                    f"add file = \"{holders[0]}\" (say) to the outcome")
        else:
            out[spec.param] = holders[0] if holders else meta.files.visit_files[0]
    return out


def _selected_records(long: pd.DataFrame, raw_part: pd.DataFrame | None, outcome_files: dict[str, str],
                      meta: StudyMetadata, log: ProblemLog,
                      columns_of: dict[str, set[str]]) -> tuple[pd.DataFrame, dict, dict]:
    """Each outcome's records after its record rules (:mod:`auditor.records`), records of other
    parameters untouched; the counts per rule; and each outcome's unit."""
    selection: dict[str, list] = {}
    units: dict[str, str] = {}
    if long.empty:
        return long, selection, units
    drop = np.zeros(len(long), dtype=bool)
    for i, spec in enumerate(meta.outcomes):
        label = outcome_files.get(spec.param)
        if label is None:
            continue
        mine = ((long["param"] == spec.param) & (long["file"] == label)).fillna(False).to_numpy(dtype=bool)
        rows = long[mine]
        kept, counts = select_outcome_records(rows, spec, meta.record_rules(spec), f"outcomes[{i}]", label, meta,
                                              raw_part, meta.files.participants, log, columns_of.get(label))
        drop[np.flatnonzero(mine)[~rows.index.isin(kept.index)]] = True
        selection[spec.param] = counts
        units[spec.param] = outcome_unit(kept, spec, f"outcomes[{i}]", label, meta, log)
    return long[~drop].reset_index(drop=True), selection, units


def _normalise_long(df: pd.DataFrame, meta: StudyMetadata, label: str, log: ProblemLog) -> pd.DataFrame:
    cm = meta.columns
    ok = all([
        _need_column(df, cm.subject, label, "subject", log),
        _need_column(df, cm.param, label, "param", log),
        _need_column(df, cm.value, label, "value", log),
    ])
    has_visit = cm.visit in df.columns or cm.visit_number in df.columns
    if not has_visit:
        log.add(label, "row 1", cm.visit, "no visit column (neither the visit name nor its number)",
                f"add {cm.visit} or {cm.visit_number}, or map it in [columns] visit = ...")
    if not ok or not has_visit:
        return pd.DataFrame()
    arm_col = _arm_column(df, cm.arm)
    visit_col = cm.visit if cm.visit in df.columns else cm.visit_number
    out = pd.DataFrame({
        "row": np.arange(len(df)),
        "subject": df[cm.subject].astype("string").str.strip(),
        "param": df[cm.param].astype("string").str.strip(),
        "visit": _keys(df[visit_col], _visit_number_key if visit_col == cm.visit_number else _visit_key),
        "value": _as_numbers(df[cm.value], label, cm.value, log),
    })
    if _is_boolean(df[cm.value]):
        present = set(out["param"].dropna().unique())
        for spec in meta.outcomes:
            if spec.param in present:
                _refuse_boolean_values(spec, label, cm.value, log)
    if cm.visit_number in df.columns and visit_col != cm.visit_number:
        out["visit_number"] = _keys(df[cm.visit_number], _visit_number_key)
    if arm_col is not None:
        out["arm"] = df[arm_col].astype("string").str.strip()
    for name, col in (("dtype", cm.dtype), ("unit", cm.unit), ("category", cm.category)):
        if col in df.columns:
            out[name] = df[col].astype("string").str.strip()
    for flag in sorted(flag_names(meta) & set(df.columns)):
        out[flag_column(flag)] = df[flag].astype("string").str.strip()
    for col in sorted({s.exposure for s in meta.outcomes if s.exposure} & set(df.columns)):
        out[exposure_column(col)] = _as_numbers(df[col], label, col, log, what="observation time")
    _check_ids(out["subject"], label, cm.subject, log)
    return out


def exposure_column(name: str) -> str:
    """Internal name, in the long visit frame, of the observation-time column ``name``."""
    return f"exposure:{name}"


def _wide_to_long(df: pd.DataFrame, meta: StudyMetadata, label: str, log: ProblemLog) -> pd.DataFrame:
    cm = meta.columns
    for i, spec in enumerate(meta.outcomes):
        if spec.exposure:
            log.add(METADATA_FILE, f"outcomes[{i}].exposure", spec.exposure,
                    "an observation time per record needs the long layout (one row per visit)",
                    "give the visit data in the long layout, or remove exposure")
    if not _need_column(df, cm.subject, label, "subject", log):
        return pd.DataFrame()
    arm_col = _arm_column(df, cm.arm)
    _check_ids(df[cm.subject].astype("string").str.strip(), label, cm.subject, log)
    pieces = []
    ambiguous = _ambiguous_wide_columns(meta, label, log)
    for spec in meta.outcomes:
        for visit in _visits_of(spec):
            col = meta.files.wide_pattern.format(param=spec.param, visit=_visit_key(visit))
            if col in ambiguous:
                continue
            if col not in df.columns:
                log.add(label, "row 1", col, f"no column for parameter '{spec.param}' at visit "
                        f"'{_visit_key(visit)}'", f"add it or change files.wide_pattern "
                        f"({did_you_mean(col, df.columns)})")
                continue
            if _is_boolean(df[col]):
                _refuse_boolean_values(spec, label, col, log)
            piece = pd.DataFrame({
                "row": np.arange(len(df)),
                "subject": df[cm.subject].astype("string").str.strip(),
                "param": spec.param,
                "visit": _visit_key(visit),
                "value": _as_numbers(df[col], label, col, log),
            })
            if arm_col is not None:
                piece["arm"] = df[arm_col].astype("string").str.strip()
            pieces.append(piece)
    if not pieces:
        return pd.DataFrame()
    out = pd.concat(pieces, ignore_index=True)
    out["param"] = out["param"].astype("string")
    out["visit"] = out["visit"].astype("string")
    return out


def _ambiguous_wide_columns(meta: StudyMetadata, label: str, log: ProblemLog) -> set[str]:
    """Wide-layout column names that ``files.wide_pattern`` builds for two different outcomes
    (``HR`` at ``Week_4`` and ``HR_Week`` at ``4`` both give ``HR_Week_4``); each is reported and
    used for neither, since nothing in the file says whose values it holds."""
    claims: dict[str, list[tuple[str, str]]] = {}
    for spec in meta.outcomes:
        for visit in _visits_of(spec):
            col = meta.files.wide_pattern.format(param=spec.param, visit=_visit_key(visit))
            claims.setdefault(col, []).append((spec.param, _visit_key(visit)))
    ambiguous = set()
    for col in sorted(claims):
        owners = claims[col]
        if len({p for p, _ in owners}) > 1:
            ambiguous.add(col)
            both = " and ".join(f"outcome '{p}' at visit '{v}'" for p, v in owners)
            log.add(label, "row 1", col, f"column name matches more than one outcome: {both}",
                    "rename the parameter codes or visits so that each column names one outcome and visit, or "
                    "set files.wide_pattern with a separator none of them contains (e.g. \"{param}__{visit}\")")
    return ambiguous


def _is_boolean(series: pd.Series) -> bool:
    """True for a column of true/false values (a Parquet boolean, with or without missing cells)."""
    if pd.api.types.is_bool_dtype(series):
        return True
    if series.dtype != object:
        return False
    present = series.dropna()
    return len(present) > 0 and isinstance(present.iloc[0], (bool, np.bool_)) and \
        present.map(lambda v: isinstance(v, (bool, np.bool_))).all()


def _refuse_boolean_values(spec: OutcomeSpec, label: str, column: str, log: ProblemLog) -> None:
    """A true/false value column is read as 0/1, which is right only for a binary outcome: on any
    other scale it would be analysed as a continuous 0/1 measurement."""
    if spec.scale == "binary":
        return
    log.add(label, "-", column, f"values of '{spec.param}' are true/false, but its scale is '{spec.scale}'",
            "store the measured values as numbers, or declare scale = \"binary\" if the outcome is yes/no")


def _participants(raw: pd.DataFrame | None, long: pd.DataFrame, meta: StudyMetadata,
                  log: ProblemLog) -> pd.DataFrame:
    """One row per participant with arm, endpoints and covariates, from the participant file if
    given, otherwise from the visit file (arm only)."""
    cm = meta.columns
    if long.empty:
        return pd.DataFrame()
    if raw is None:
        if "arm" not in long.columns:
            if meta.study.blinded and not meta.study.arms:
                return pd.DataFrame({"subject": sorted(long["subject"].dropna().unique()), "arm": POOLED_ARM})
            if meta.study.design == "single-arm":
                subj = sorted(long["subject"].dropna().unique())
                return pd.DataFrame({"subject": subj, "arm": meta.study.arms[0] if meta.study.arms else "All"})
            log.add(meta.files.visit_files[0], "row 1", cm.arm or "TRT01P", "no arm column",
                    "add TRTP or TRT01P, map it in [columns] arm = ..., or give files.participants")
            return pd.DataFrame()
        arms = long.dropna(subset=["subject"]).groupby("subject")["arm"].agg(lambda s: sorted(set(s.dropna())))
        multi = arms[arms.map(len) > 1]
        if len(multi):
            log.add(meta.files.visit_files[0], "-", cm.arm or "TRT01P",
                    f"{len(multi)} participant(s) have more than one arm",
                    "give each participant a single planned arm")
        return pd.DataFrame({"subject": arms.index.astype(str),
                             "arm": [a[0] if a else pd.NA for a in arms]}).reset_index(drop=True)
    label = meta.files.participants
    if not _need_column(raw, cm.subject, label, "subject", log):
        return pd.DataFrame()
    arm_col = _arm_column(raw, cm.arm)
    out = pd.DataFrame({"subject": raw[cm.subject].astype("string").str.strip()})
    if arm_col is None:
        if meta.study.blinded and not meta.study.arms:
            out["arm"] = POOLED_ARM  # pooled: no arm is read
        elif meta.study.design == "single-arm":
            out["arm"] = meta.study.arms[0] if meta.study.arms else "All"
        else:
            log.add(label, "row 1", cm.arm or "TRT01P", "no arm column",
                    "add TRTP or TRT01P, or map it in [columns] arm = ...")
            return pd.DataFrame()
    else:
        out["arm"] = raw[arm_col].astype("string").str.strip()
    _check_ids(out["subject"], label, cm.subject, log)
    dup = out["subject"].duplicated(keep=False) & out["subject"].notna()
    if dup.any():
        log.add(label, rows_text(np.flatnonzero(dup)), cm.subject,
                "participant appears on more than one row", "keep one row per participant")
    extra_cols = set()
    extra_cols.update(flag_names(meta) & set(raw.columns))
    for spec in meta.outcomes:
        extra_cols.update(spec.covariates)
        if spec.risk_endpoint:
            extra_cols.add(spec.risk_endpoint)
    for col in sorted(extra_cols - {"subject", "arm"}):
        if col not in raw.columns:
            continue  # reported per outcome
        out[col] = raw[col].reset_index(drop=True)
    return out


def _check_arms(long: pd.DataFrame, part: pd.DataFrame, meta: StudyMetadata, arm_col: str | None,
                log: ProblemLog) -> None:
    """Arms against study.arms, the number of arms against the design, and participants present in
    one file but not the other."""
    label = meta.files.participants or meta.files.visit_files[0]
    arm_name = arm_col or meta.columns.arm or "TRT01P"
    declared = set(meta.study.arms)
    present = set(part["arm"].dropna().unique()) - {""}
    if declared:
        _unknown_arms(part, sorted(present - declared), declared, label, arm_name, log)
        for arm in sorted(declared - present):
            log.add(METADATA_FILE, "study.arms", "-", f"arm '{arm}' has no participants in the data",
                    "remove it from [study] arms or check the arm column")
    no_arm = part["arm"].isna() | (part["arm"] == "")
    if no_arm.any():
        log.add(label, rows_text(np.flatnonzero(no_arm)), arm_name, "arm is empty",
                "fill in the planned arm")
    _arms_against_design(part, present, meta, label, arm_name, log)
    _subjects_in_both(long, part, meta, log)


def _unknown_arms(part: pd.DataFrame, unknown: list[str], declared: set, label: str, arm_name: str,
                  log: ProblemLog) -> None:
    for arm in unknown[:MAX_ARM_MESSAGES]:
        rows = np.flatnonzero((part["arm"] == arm).fillna(False).to_numpy())
        log.add(label, rows_text(rows), arm_name, f"arm '{arm}' is not in study.arms",
                f"add it to [study] arms or correct the label ({did_you_mean(arm, declared)})")
    if len(unknown) > MAX_ARM_MESSAGES:
        log.add(label, "-", arm_name, f"{len(unknown) - MAX_ARM_MESSAGES} more arm labels are not in study.arms "
                f"({len(unknown)} in all)", "check that this column holds the planned arm, or map the arm "
                "column under [columns] in study.toml")


def _arms_against_design(part: pd.DataFrame, present: set, meta: StudyMetadata, label: str, arm_name: str,
                         log: ProblemLog) -> None:
    """A parallel design needs two arms in the data; a lone participant in an arm, or several arms in
    a single-arm design, is allowed but said."""
    if meta.study.design == "parallel" and len(present) == 1:
        log.add(label, "-", arm_name, f"every participant is in arm '{next(iter(present))}', but a "
                "parallel-group design needs participants in at least two arms",
                "check the arm column, or set design = \"single-arm\" for a before-after study")
    if meta.study.design == "single-arm" and len(present) > 1:
        log.add(label, "-", arm_name, f"the data hold {len(present)} arms but the design is single-arm",
                "the arms are pooled; set design = \"parallel\" with arms and control_arm to compare them",
                severity="warning")
    if meta.study.design == "parallel":
        counts = part["arm"].value_counts()
        for arm in sorted(a for a in present if counts.get(a, 0) < MIN_PER_ARM):
            rows = np.flatnonzero((part["arm"] == arm).fillna(False).to_numpy())
            log.add(label, rows_text(rows), arm_name, f"arm '{arm}' has a single participant",
                    "no comparison with this arm is possible: its outcomes are reported as not assessable",
                    severity="warning", by_arm=True)


def _subjects_in_both(long: pd.DataFrame, part: pd.DataFrame, meta: StudyMetadata, log: ProblemLog) -> None:
    """Participants in the visit file but not the participant file (an error) and the reverse (a
    warning: randomised participants without visit data are ordinary drop-outs)."""
    if not meta.files.participants:
        return
    orphan = long["subject"].notna().to_numpy() & ~_among(long["subject"], part["subject"].unique())
    for label in meta.files.visit_files:
        here = orphan & (long["file"] == label).fillna(False).to_numpy(dtype=bool) if "file" in long else orphan
        if here.any():
            n = long.loc[here, "subject"].nunique()
            log.add(label, rows_text(long.loc[here, "row"].to_numpy()), meta.columns.subject,
                    f"{n} participant(s) are not in the participant file",
                    f"add them to {meta.files.participants} or drop their rows")
    silent = part["subject"].notna().to_numpy() & ~_among(part["subject"], long["subject"].unique())
    if silent.any():
        n = part.loc[silent, "subject"].nunique()
        log.add(meta.files.participants, rows_text(np.flatnonzero(silent)), meta.columns.subject,
                f"{n} participant(s) have no visit data", "they are left out of every check",
                severity="warning")


def _visits_of(spec: OutcomeSpec) -> list:
    out = []
    for v in [spec.screening_visit, spec.baseline_visit, *spec.followup_visits]:
        if v is not None and v not in out:
            out.append(v)
    if spec.entry_criterion is not None and spec.entry_criterion.visit not in out:
        out.append(spec.entry_criterion.visit)
    return out


def _records_by_file(long: pd.DataFrame, labels: set[str]) -> dict[str, tuple[pd.DataFrame, dict]]:
    """Each named visit file's records, with the row positions of each parameter in them, found in
    one grouping pass per file (rather than comparing the whole text column once per outcome)."""
    out = {}
    for label in sorted(labels):
        frame = long[(long["file"] == label).fillna(False).to_numpy(dtype=bool)]
        out[label] = frame, frame.groupby("param", sort=False, dropna=True).indices
    return out


class _VisitIndex:
    """The visit name and number of an outcome's records as plain arrays, compared once per visit
    asked about: the same rows as :func:`_visit_rows`, without a text-column comparison each time."""

    def __init__(self, rows: pd.DataFrame):
        self.visit = rows["visit"].to_numpy(dtype=object, na_value=None)
        self.number = (rows["visit_number"].to_numpy(dtype=object, na_value=None)
                       if "visit_number" in rows.columns else None)

    def rows(self, visit) -> np.ndarray:
        key = _visit_key(visit)
        mask = self.visit == key
        if self.number is not None and isinstance(visit, (int, float)):
            mask = mask | (self.number == key)
        return np.asarray(mask, dtype=bool)


def _visit_rows(rows: pd.DataFrame, visit) -> pd.Series:
    key = _visit_key(visit)
    mask = rows["visit"] == key
    if "visit_number" in rows.columns and isinstance(visit, (int, float)):
        mask = mask | (rows["visit_number"] == key)
    return mask.fillna(False)


def _check_outcome(long: pd.DataFrame, part: pd.DataFrame, spec: OutcomeSpec, i: int,
                   meta: StudyMetadata, label: str, log: ProblemLog, rows: pd.DataFrame | None = None) -> None:
    """One outcome's records against its declaration: visits present, one value per participant and
    visit, values within bounds, levels or 0/1, baselines, observation times, covariates, endpoint.
    ``rows`` are the outcome's records of ``long`` when the caller has found them already."""
    cm = meta.columns
    key = f"outcomes[{i}]"
    if rows is None:
        rows = long[long["param"] == spec.param]
    if rows.empty:
        log.add(METADATA_FILE, f"{key}.param", "-", f"parameter '{spec.param}' is not in the data",
                f"correct the code ({did_you_mean(spec.param, long['param'].dropna().unique())})")
        return
    index = _VisitIndex(rows)
    known_visits = set(rows["visit"].dropna().unique())
    if "visit_number" in rows.columns:
        known_visits |= set(rows["visit_number"].dropna().unique())
    for name, visit in (("baseline_visit", spec.baseline_visit), ("screening_visit", spec.screening_visit),
                        *[(f"followup_visits[{j}]", v) for j, v in enumerate(spec.followup_visits)]):
        if visit is not None and not index.rows(visit).any():
            log.add(METADATA_FILE, f"{key}.{name}", "-",
                    f"visit '{_visit_key(visit)}' has no rows for '{spec.param}'",
                    f"correct the visit name ({did_you_mean(_visit_key(visit), known_visits)})")
    if spec.entry_criterion is not None and not index.rows(spec.entry_criterion.visit).any():
        log.add(METADATA_FILE, f"{key}.entry_criterion.visit", "-",
                f"visit '{_visit_key(spec.entry_criterion.visit)}' has no rows for '{spec.param}'",
                f"correct the visit name ({did_you_mean(_visit_key(spec.entry_criterion.visit), known_visits)})")
    used = rows[np.logical_or.reduce([index.rows(v) for v in _visits_of(spec)])]
    dup = used.duplicated(subset=["subject", "visit"], keep=False)
    if dup.any():
        log.add(label, rows_text(used.loc[dup, "row"].to_numpy()), cm.value,
                f"more than one value for the same participant and visit of '{spec.param}'",
                "keep one record per participant, visit and parameter (e.g. the analysis record, ANL01FL)")
    values = used["value"]
    lo, hi = spec.lower_bound, spec.upper_bound
    if spec.bounds is not None:
        outside = (values < (lo if lo is not None else -math.inf)) | (values > (hi if hi is not None else math.inf))
        if outside.any():
            log.add(label, rows_text(used.loc[outside, "row"].to_numpy()), cm.value,
                    f"'{spec.param}' value outside its declared bounds {_bounds_text(lo, hi)}",
                    "correct the value or the outcome's bounds")
    if spec.scale == "ordinal":
        bad = values.notna() & ~values.isin(spec.levels)
        if bad.any():
            log.add(label, rows_text(used.loc[bad, "row"].to_numpy()), cm.value,
                    f"'{spec.param}' value {values[bad].iloc[0]:g} is not one of the declared levels",
                    "correct the value or the outcome's levels")
    if spec.scale == "binary":
        bad = values.notna() & ~values.isin([0, 1])
        if bad.any():
            log.add(label, rows_text(used.loc[bad, "row"].to_numpy()), cm.value,
                    f"binary outcome '{spec.param}' has a value other than 0 or 1", "code it 0/1")
    if spec.baseline_visit is not None:
        with_base = rows.loc[index.rows(spec.baseline_visit) & rows["value"].notna().to_numpy(), "subject"].unique()
        lacking = rows.loc[rows["subject"].notna().to_numpy() & ~_among(rows["subject"], with_base),
                           "subject"].nunique()
        if lacking:
            log.add(label, "-", cm.value, f"{lacking} participant(s) have no baseline value for "
                    f"'{spec.param}'", "they are left out of the baseline-adjusted checks",
                    severity="warning")
    if spec.exposure:
        _check_exposure(rows, used, spec, key, label, log)
    plabel = meta.files.participants or meta.files.visit_files[0]
    for cov in spec.covariates:
        _check_covariate(part, spec, cov, f"{key}.covariates", plabel, meta, log)
    if spec.risk_endpoint:
        if spec.risk_endpoint in _reserved_columns(meta):
            log.add(METADATA_FILE, f"{key}.risk_endpoint", spec.risk_endpoint,
                    "names the participant identifier or the arm, not an event endpoint",
                    "name the column that holds the event (coded 0/1 or Y/N)")
        elif spec.risk_endpoint not in part.columns:
            log.add(plabel, "row 1", spec.risk_endpoint, f"risk endpoint of '{spec.param}' is missing",
                    "add the column to the participant file or remove risk_endpoint")
        else:
            coded = part[spec.risk_endpoint].map(_binary_code)
            bad = part[spec.risk_endpoint].notna() & coded.isna()
            if bad.any():
                log.add(plabel, rows_text(np.flatnonzero(bad.to_numpy())), spec.risk_endpoint,
                        "event endpoint is not binary", "code it 0/1 or Y/N")


def _check_entry_conditions(long: pd.DataFrame, spec: OutcomeSpec, i: int, log: ProblemLog) -> None:
    """Each further entry condition must name a parameter and a visit that the data hold."""
    if spec.entry_criterion is None:
        return
    for j, cond in enumerate(spec.entry_criterion.also):
        key = f"outcomes[{i}].entry_criterion.also[{j}]"
        param = cond.param or spec.param
        rows = long[(long["param"] == param).fillna(False)]
        if rows.empty:
            log.add(METADATA_FILE, f"{key}.param", "-", f"parameter '{param}' is not in the data",
                    f"correct the code ({did_you_mean(param, long['param'].dropna().unique())})")
        elif not _visit_rows(rows, cond.visit).any():
            log.add(METADATA_FILE, f"{key}.visit", "-", f"visit '{_visit_key(cond.visit)}' has no rows for "
                    f"'{param}'", "correct the visit name")


def _check_exposure(rows: pd.DataFrame, used: pd.DataFrame, spec: OutcomeSpec, key: str, label: str,
                    log: ProblemLog) -> None:
    """The observation-time column must exist, and each record with a count needs a positive time."""
    col = exposure_column(spec.exposure)
    if col not in rows.columns:
        log.add(label, "row 1", spec.exposure, f"observation-time column of '{spec.param}' is missing",
                "add the column to the visit file or remove exposure")
        return
    t = used[col]
    counted = used["value"].notna()
    absent = counted & t.isna()
    if absent.any():
        log.add(label, rows_text(used.loc[absent, "row"].to_numpy()), spec.exposure,
                f"'{spec.param}' record has a count but no observation time",
                "fill in the time over which the count was made, or leave the count empty")
    nonpositive = t.notna() & (t <= 0)
    if nonpositive.any():
        log.add(label, rows_text(used.loc[nonpositive, "row"].to_numpy()), spec.exposure,
                f"observation time of '{spec.param}' is zero or negative",
                "give the time over which the count was made (greater than 0)")


def _bounds_text(lo, hi) -> str:
    """``[0.0, inf]``: declared bounds, a missing bound written as the infinity it stands for."""
    def one(b, none):
        return none if b is None else str(float(b))
    return f"[{one(lo, '-inf')}, {one(hi, 'inf')}]"


def _reserved_columns(meta: StudyMetadata) -> set[str]:
    """Columns that are never a covariate or an endpoint: the identifier, the arm, and the internal
    names of the participant frame."""
    cm = meta.columns
    return {cm.subject, cm.arm or "", *ARM_DEFAULTS, "subject", "arm"} - {""}


def _check_covariate(part: pd.DataFrame, spec: OutcomeSpec, cov: str, key: str, label: str,
                     meta: StudyMetadata, log: ProblemLog) -> None:
    """A covariate must exist, must not be the identifier or the arm, must be numeric, and should vary."""
    if cov in _reserved_columns(meta):
        log.add(METADATA_FILE, key, cov, f"covariate of '{spec.param}' is the participant "
                "identifier or the arm", "name a numeric participant-level column instead")
        return
    if cov not in part.columns:
        log.add(label, "row 1", cov, f"covariate of '{spec.param}' is missing",
                "add the column to the participant file or remove it from covariates")
        return
    values = _as_numbers(part[cov], label, cov, log, what="covariate")
    if values.notna().any() and values.nunique() == 1:
        log.add(label, "-", cov, f"covariate of '{spec.param}' has the same value for every participant",
                "it carries no information; remove it from covariates", severity="warning")


def _binary_code(v):
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return np.nan
    s = str(v).strip().lower()
    if s in TRUE_CODES:
        return 1.0
    if s in FALSE_CODES:
        return 0.0
    return np.nan


# --------------------------------------------------------------------------- per outcome


def outcome_data(study: Study, spec: OutcomeSpec) -> OutcomeData:
    """One row per participant for one outcome (participants with no data for it are dropped)."""
    rows = study.visits[study.visits["param"] == spec.param]
    if spec.param in study.outcome_files and "file" in rows.columns:
        rows = rows[rows["file"] == study.outcome_files[spec.param]]
    part = study.participants
    frame = part[["subject", "arm"]].copy()
    frame = frame[_among(frame["subject"], rows["subject"].unique())]

    def values_at(visit, name, column="value"):
        sel = rows[_visit_rows(rows, visit)][["subject", column]].rename(columns={column: name})
        return sel.drop_duplicates("subject")

    if spec.baseline_visit is not None:
        frame = frame.merge(values_at(spec.baseline_visit, "baseline"), on="subject", how="left")
    if spec.screening_visit is not None:
        frame = frame.merge(values_at(spec.screening_visit, "screening"), on="subject", how="left")
    if spec.entry_criterion is not None and spec.entry_criterion.visit not in (
            spec.baseline_visit, spec.screening_visit):
        frame = frame.merge(values_at(spec.entry_criterion.visit, "entry_value"), on="subject", how="left")
    for v in spec.followup_visits:
        frame = frame.merge(values_at(v, f"fu:{_visit_key(v)}"), on="subject", how="left")
    frame["followup"] = frame[f"fu:{_visit_key(spec.main_followup)}"]
    if spec.exposure and exposure_column(spec.exposure) in rows.columns:
        col = exposure_column(spec.exposure)
        if spec.baseline_visit is not None:
            frame = frame.merge(values_at(spec.baseline_visit, "baseline_time", col), on="subject", how="left")
        frame = frame.merge(values_at(spec.main_followup, "followup_time", col), on="subject", how="left")
    if spec.risk_endpoint:
        ev = part[["subject", spec.risk_endpoint]].copy()
        ev["event"] = ev[spec.risk_endpoint].map(_binary_code).astype(float)
        frame = frame.merge(ev[["subject", "event"]], on="subject", how="left")
    for cov in spec.covariates:
        cv = part[["subject", cov]].copy()
        cv[cov] = pd.to_numeric(cv[cov], errors="coerce").astype(float)
        frame = frame.merge(cv, on="subject", how="left")
    frame = frame.sort_values("subject", kind="mergesort").reset_index(drop=True)
    meta = study.metadata.study
    arms = list(meta.arms) if meta.arms else sorted(frame["arm"].dropna().unique())
    return OutcomeData(spec=spec, frame=frame, arms=arms, control_arm=meta.control_arm,
                       design=meta.design, derived_columns=study.derived_columns)

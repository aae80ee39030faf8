"""The file-reading layer under injected faults: SAS transport zeros and truncation, row limits,
NUL tails, damaged and wide encodings, a spreadsheet's ``sep=`` line, boolean value columns and
ambiguous wide-layout columns.

Each test builds the invented study of ``test_hostile_inputs`` (or a file of its own), injects one
fault and asserts either an exact reading or a clean refusal: exit code 2, one line per problem
naming the file, the place, the problem and the fix, nothing written.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pyreadstat
import pytest

from auditor.cli import app
from auditor.errors import ProblemLog, StudyInputError
from auditor.metadata import DEFAULT_MAX_ROWS
from auditor.study import load_study, read_table
from tests.cli.test_hostile_inputs import FAST, Synthetic, assert_clean_failure, assert_nothing_written, data_row
from tests.cli.test_validate_broken import _stderr, runner

OBS_HEADER = b"HEADER RECORD*******OBS     HEADER RECORD!!!!!!!"
"""The record that precedes the observations (SAS transport format version 5, from memory)."""


def refused(tmp_path: Path, s: Synthetic, patterns) -> None:
    """``validate`` and ``run`` both end with exit 2 and the patterns; ``run`` writes nothing."""
    folder = s.write(tmp_path / "study")
    assert_clean_failure(runner.invoke(app, ["validate", str(folder)]), patterns)
    out = tmp_path / "audit"
    assert_clean_failure(runner.invoke(app, ["run", str(folder), "-o", str(out), *FAST]), patterns)
    assert_nothing_written(tmp_path, out)


def accepted(tmp_path: Path, s: Synthetic) -> Path:
    folder = s.write(tmp_path / "study")
    res = runner.invoke(app, ["validate", str(folder)])
    assert res.exit_code == 0, _stderr(res)
    return folder


def problems_of(path: Path, **kw) -> tuple[pd.DataFrame | None, list[str]]:
    """``read_table`` on one file: the frame and the one-line problems."""
    log = ProblemLog()
    df = read_table(path, path.name, log, **kw)
    return df, [p.one_line() for p in log.problems]


def write_xpt(df: pd.DataFrame, path: Path) -> None:
    """A SAS transport version 5 file written by pyreadstat (ReadStat), independent of the reader."""
    pyreadstat.write_xport(df, str(path), file_format_version=5)


def visits_as_xpt(s: Synthetic) -> None:
    s.meta["files"]["visits"] = "data/adeff.xpt"
    s.then(lambda f: write_xpt(s.adeff, f / "data" / "adeff.xpt"))


# --------------------------------------------------------------------------- 1. transport zeros


def test_xpt_zeros_negatives_and_missing_read_exactly(tmp_path):
    written = [0.0, -1.5, np.nan, 2.0, 0.0, -273.15, 1e-5, 100.0, -0.0]
    path = tmp_path / "values.xpt"
    write_xpt(pd.DataFrame({"AVAL": written, "TXT": ["a", "bb", "", "c", "d", "e", "f", "g", "h"]}), path)
    df, problems = problems_of(path)
    assert problems == []
    got = df["AVAL"].to_numpy()
    # Expected: the values given to pyreadstat.write_xport; IBM doubles hold these to within 2**-52
    # relative (56-bit mantissa), zeros and NaN exactly.
    assert got[0] == 0.0 and got[4] == 0.0 and got[8] == 0.0
    assert np.isnan(got[2])
    np.testing.assert_allclose(got[[1, 3, 5, 6, 7]], [-1.5, 2.0, -273.15, 1e-5, 100.0], rtol=1e-15)
    assert list(df["TXT"].fillna("")) == ["a", "bb", "", "c", "d", "e", "f", "g", "h"]


def test_xpt_special_missing_stays_missing(tmp_path):
    path = tmp_path / "special.xpt"
    write_xpt(pd.DataFrame({"AVAL": [0.0, np.nan, 3.0]}), path)
    raw = bytearray(path.read_bytes())
    start = raw.find(OBS_HEADER) + 80
    # Observation 2's 8 bytes are '.' then zeros (pyreadstat's missing); 0x41 then zeros is the SAS
    # special missing value .A (SAS transport format documentation, from memory).
    assert raw[start + 8:start + 16] == b".\x00\x00\x00\x00\x00\x00\x00"
    raw[start + 8] = 0x41
    path.write_bytes(bytes(raw))
    df, problems = problems_of(path)
    assert problems == []
    assert df["AVAL"].iloc[0] == 0.0 and np.isnan(df["AVAL"].iloc[1]) and df["AVAL"].iloc[2] == 3.0


def test_xpt_ordinal_zero_is_a_declared_level(tmp_path):
    s = Synthetic()
    o = s.outcome("DBP")
    o.update(scale="ordinal", levels=[0, 1, 2, 3, 4], bounds=None)
    m = s.rows("DBP")
    s.adeff.loc[m, "AVAL"] = np.resize([0, 1, 2, 3, 4], int(m.sum())).astype(float)
    visits_as_xpt(s)
    folder = accepted(tmp_path, s)
    study = load_study(folder)
    dbp = study.visits.loc[study.visits["param"] == "DBP", "value"]
    # Expected: the levels written above, exactly.
    assert set(dbp.unique()) == {0.0, 1.0, 2.0, 3.0, 4.0}
    assert (dbp == 0.0).sum() == (s.adeff.loc[m, "AVAL"] == 0.0).sum()


# --------------------------------------------------------------------------- 2. transport truncation


def _cut_xpt(keep):
    """A hook that keeps the first ``keep(raw)`` bytes of the visit file."""
    def hook(folder: Path):
        p = folder / "data" / "adeff.xpt"
        raw = p.read_bytes()
        p.write_bytes(raw[:keep(raw)])
    return hook


def test_xpt_cut_inside_a_record_is_refused(tmp_path):
    s = Synthetic()
    visits_as_xpt(s)
    s.then(_cut_xpt(lambda raw: len(raw) - 1000 - 37))
    size = None

    def remember(folder):
        nonlocal size
        size = (folder / "data" / "adeff.xpt").stat().st_size
    s.then(remember)
    folder = s.write(tmp_path / "study")
    res = runner.invoke(app, ["validate", str(folder)])
    assert size % 80 != 0
    assert_clean_failure(res, [r"data/adeff\.xpt:", "cut short", rf"cut short at byte {size}"])


def test_xpt_cut_on_a_record_boundary_mid_observation_is_refused(tmp_path):
    path = tmp_path / "short.xpt"
    # 8-byte number + 3-byte text = 11 bytes an observation, so whole records of 80 bytes end inside one.
    write_xpt(pd.DataFrame({"AVAL": np.arange(200, dtype=float) + 1, "TXT": ["abc"] * 200}), path)
    raw = path.read_bytes()
    start = raw.find(OBS_HEADER) + 80
    cut = start + 80 * 20
    assert (cut - start) % 11 != 0
    path.write_bytes(raw[:cut])
    df, problems = problems_of(path)
    assert df is None
    assert len(problems) == 1 and f"cut short at byte {cut}" in problems[0], problems
    whole = tmp_path / "whole.xpt"
    whole.write_bytes(raw)
    df, problems = problems_of(whole)
    assert problems == [] and len(df) == 200


# --------------------------------------------------------------------------- 3. row limits


def test_parquet_expanding_to_sixty_million_rows_is_refused_from_its_footer(tmp_path):
    s = Synthetic()
    s.meta["files"]["visits"] = "data/adeff.parquet"

    def huge(folder):
        column = pa.array(np.zeros(60_000_000, dtype=np.int8))
        pq.write_table(pa.table({"AVAL": column}), folder / "data" / "adeff.parquet")
    s.then(huge)
    folder = s.write(tmp_path / "study")
    assert (folder / "data" / "adeff.parquet").stat().st_size < 5_000_000
    t0 = time.perf_counter()
    res = runner.invoke(app, ["validate", str(folder)])
    elapsed = time.perf_counter() - t0
    assert_clean_failure(res, [r"data/adeff\.parquet:", "60,000,000 rows", "limit of 20,000,000 rows",
                               r"max_rows = \d+ .*under \[files\] in study\.toml"])
    assert elapsed < 20, elapsed
    assert DEFAULT_MAX_ROWS == 20_000_000


def test_row_limit_is_raised_and_lowered_in_study_toml(tmp_path):
    s = Synthetic()
    s.meta["files"]["participants"] = "data/adsl.parquet"
    s.then(lambda f: s.adsl.to_parquet(f / "data" / "adsl.parquet"))
    s.meta["files"]["max_rows"] = 39  # 40 participants, 240 visit rows
    refused(tmp_path, s, [r"data/adsl\.parquet:", "has 40 rows, more than the limit of 39 rows",
                          r"data/adeff\.csv:", "has 240 lines after the header"])
    s.meta["files"]["max_rows"] = 239
    refused(tmp_path / "visits", s, [r"data/adeff\.csv:", "more than the limit of 239 rows"])
    s.meta["files"]["max_rows"] = 240
    accepted(tmp_path / "again", s)


def test_row_limit_applies_to_csv_counted_from_line_breaks(tmp_path):
    s = Synthetic()
    rows = len(s.adeff)
    s.meta["files"]["max_rows"] = rows - 1
    refused(tmp_path, s, [r"data/adeff\.csv:", f"{rows:,} lines after the header", f"limit of {rows - 1:,} rows"])
    s.meta["files"]["max_rows"] = rows
    accepted(tmp_path / "again", s)


def test_row_limit_applies_to_xpt_counted_from_its_size(tmp_path):
    path = tmp_path / "rows.xpt"
    write_xpt(pd.DataFrame({"AVAL": np.arange(100, dtype=float)}), path)
    df, problems = problems_of(path, max_rows=99)
    assert df is None and len(problems) == 1
    assert "100 observations, more than the limit of 99 rows" in problems[0]
    df, problems = problems_of(path, max_rows=100)
    assert problems == [] and len(df) == 100


def test_row_limit_key_is_checked_in_study_toml(tmp_path):
    s = Synthetic()
    s.meta["files"]["max_rows"] = 0
    refused(tmp_path, s, [r"study\.toml: files\.max_rows", "greater than or equal to 1"])


# --------------------------------------------------------------------------- 4. NUL bytes


def test_nul_tail_after_the_first_64_kib_is_refused_naming_its_row(tmp_path):
    s = Synthetic(n_per_arm=150)
    lines = None

    def tail(folder):
        nonlocal lines
        p = folder / "data" / "adeff.csv"
        raw = p.read_bytes()
        assert len(raw) > 65536
        lines = raw.count(b"\n")
        p.write_bytes(raw + b"\x00" * 2_000_000)
    s.then(tail)
    folder = s.write(tmp_path / "study")
    res = runner.invoke(app, ["validate", str(folder)])
    # The text ends with a line break after line ``lines``, so the first NUL is on line lines + 1.
    assert_clean_failure(res, [rf"data/adeff\.csv: row {lines + 1}:? ", "not a text file from this row on"])


def test_nul_early_is_binary_data_with_its_row(tmp_path):
    path = tmp_path / "early.csv"
    path.write_bytes(b"A,B\n1,2\n3,\x004\n")
    df, problems = problems_of(path)
    assert df is None and problems == ["early.csv: row 3 is not a text file (it holds binary data; the first NUL "
                                       "byte is on this row). Fix: export the data as CSV, Parquet or SAS "
                                       "transport (.xpt)."]


# --------------------------------------------------------------------------- 5. encodings


def test_stray_byte_in_utf8_text_is_reported_with_its_row_and_value(tmp_path):
    s = Synthetic()
    s.adsl["TRT01P"] = s.adsl["TRT01P"].replace({"Active": "Wirkstoff Ä"})
    s.adeff["TRTP"] = s.adeff["TRTP"].replace({"Active": "Wirkstoff Ä"})
    s.meta["study"]["arms"] = ["Control", "Wirkstoff Ä"]

    def stray(folder):
        p = folder / "data" / "adsl.csv"
        lines = p.read_bytes().split(b"\n")
        assert b"Control" in lines[5]
        lines[5] = lines[5].replace(b"Control", b"Contr\xe9l")
        p.write_bytes(b"\n".join(lines))
    s.then(stray)
    # Line index 5 is the file's row 6 (header = row 1).
    refused(tmp_path, s, [r"data/adsl\.csv: row 6:? ", "byte 0xE9 is not valid UTF-8", "save the file again as UTF-8"])


def test_latin1_without_utf8_sequences_is_still_read_as_latin1(tmp_path):
    path = tmp_path / "latin.csv"
    path.write_bytes("CODE,LABEL\nHb,Hämoglobin\nNa,Natrium ß\n".encode("cp1252"))
    df, problems = problems_of(path)
    assert problems == [] and list(df["LABEL"]) == ["Hämoglobin", "Natrium ß"]


@pytest.mark.parametrize("codec,bom", [("utf-32-le", b"\xff\xfe\x00\x00"), ("utf-32-be", b"\x00\x00\xfe\xff")])
def test_utf32_with_byte_order_mark_is_read(tmp_path, codec, bom):
    s = Synthetic()
    s.adsl["TRT01P"] = s.adsl["TRT01P"].replace({"Active": "Wirkstoff Ä"})
    s.adeff["TRTP"] = s.adeff["TRTP"].replace({"Active": "Wirkstoff Ä"})
    s.meta["study"]["arms"] = ["Control", "Wirkstoff Ä"]

    def as_utf32(folder):
        for name in ("adeff.csv", "adsl.csv"):
            p = folder / "data" / name
            p.write_bytes(bom + p.read_text(encoding="utf-8").encode(codec))
    s.then(as_utf32)
    folder = accepted(tmp_path, s)
    assert (folder / "data" / "adsl.csv").read_bytes().startswith(bom)
    study = load_study(folder)
    assert set(study.participants["arm"]) == {"Control", "Wirkstoff Ä"}
    assert len(study.visits) == len(s.adeff)


def test_damaged_utf32_is_refused_naming_the_encoding(tmp_path):
    path = tmp_path / "bad32.csv"
    path.write_bytes(b"\xff\xfe\x00\x00" + "A,B\n1,2\n".encode("utf-32-le") + b"\x00\x00\x11\x00")
    df, problems = problems_of(path)
    assert df is None and len(problems) == 1 and "UTF-32 byte-order mark but is not valid UTF-32" in problems[0]


# --------------------------------------------------------------------------- 6. sep= first line


def test_sep_comma_line_is_skipped_and_rows_still_match_the_file(tmp_path):
    s = Synthetic()
    s.then(lambda f: (f / "data" / "adeff.csv").write_bytes(b"sep=,\r\n" + (f / "data" / "adeff.csv").read_bytes()))
    accepted(tmp_path / "clean", s)
    s.adeff["AVAL"] = s.adeff["AVAL"].astype(object)
    s.adeff.loc[3, "AVAL"] = "high"
    # Frame row 3 is row 5 of a plain file (data_row); the sep= line moves it to row 6.
    assert data_row(3) == "row 5"
    refused(tmp_path / "broken", s, [r"data/adeff\.csv: row 6 column AVAL", "not a number"])


def test_sep_line_moves_header_and_parser_rows(tmp_path):
    path = tmp_path / "sep.csv"
    path.write_bytes(b"sep=,\nA,B\n1,2\n1,2,3\n")
    df, problems = problems_of(path)
    # The ragged row is the file's 4th line.
    assert df is None and problems == ["sep.csv: row 4 has 3 cells where the header has 2. Fix: check the quoting "
                                       "and the number of cells on that row, or export the file again."]
    path.write_bytes(b"sep=,\nA,A\n1,2\n")
    df, problems = problems_of(path)
    assert problems and problems[0].startswith("sep.csv: row 2 column A: column name appears more than once")


def test_sep_line_naming_another_delimiter_is_refused(tmp_path):
    s = Synthetic()

    def semicolons(folder):
        p = folder / "data" / "adeff.csv"
        p.write_text("sep=;\n" + p.read_text().replace(",", ";"))
    s.then(semicolons)
    refused(tmp_path, s, [r"data/adeff\.csv: row 1:? ", "'sep=;' says columns are separated by semicolons",
                          "comma-separated"])


# --------------------------------------------------------------------------- 7. boolean values


def _boolean_values(s: Synthetic, param: str) -> None:
    """Visit file as Parquet with AVAL a boolean column: ``param`` alternates true/false, the rest
    are true where above the median."""
    s.meta["files"]["visits"] = "data/adeff.parquet"
    m = s.rows(param)

    def write(folder):
        frame = s.adeff.copy()
        flags = frame["AVAL"] > frame["AVAL"].median()
        flags[m] = np.resize([True, False], int(m.sum()))
        frame["AVAL"] = flags.astype(bool)
        frame.to_parquet(folder / "data" / "adeff.parquet")
    s.then(write)


def test_boolean_value_column_is_refused_for_a_continuous_outcome(tmp_path):
    s = Synthetic()
    _boolean_values(s, "DBP")
    refused(tmp_path, s, [r"data/adeff\.parquet: column AVAL: values of 'SBP' are true/false, but its scale "
                          r"is 'continuous'", "declare scale = \"binary\""])


def test_boolean_value_column_is_accepted_for_binary_outcomes(tmp_path):
    s = Synthetic()
    for o in s.meta["outcomes"]:
        o.update(scale="binary", bounds=None, planned_analysis="follow-up-only")
    _boolean_values(s, "DBP")
    folder = accepted(tmp_path, s)
    study = load_study(folder)
    dbp = study.visits.loc[study.visits["param"] == "DBP", "value"]
    assert set(dbp.unique()) == {0.0, 1.0}


# --------------------------------------------------------------------------- 8. wide ambiguity


def test_wide_column_matching_two_outcomes_is_refused(tmp_path):
    s = Synthetic()
    s.wide = True
    s.meta["files"]["layout"] = "wide"
    s.adeff["AVISIT"] = s.adeff["AVISIT"].str.replace(" ", "_")
    s.adeff["PARAMCD"] = s.adeff["PARAMCD"].replace({"DBP": "SBP_Week"})
    sbp, other = s.meta["outcomes"]
    sbp.update(followup_visits=["Week_4", "Week_8"])
    other.update(param="SBP_Week", followup_visits=["4"])
    # SBP at Week_4 and SBP_Week at 4 both give SBP_Week_4 under "{param}_{visit}".
    refused(tmp_path, s, [r"data/adeff\.csv: row 1 column SBP_Week_4: column name matches more than one outcome: "
                          r"outcome 'SBP' at visit 'Week_4' and outcome 'SBP_Week' at visit '4'",
                          r"\{param\}__\{visit\}"])
    other.update(followup_visits=["Week_8"])
    accepted(tmp_path / "again", s)


def test_problems_from_the_loader_are_raised_together(tmp_path):
    s = Synthetic()
    s.then(lambda f: (f / "data" / "adeff.csv").write_bytes(b"sep=|\nA|B\n"))
    s.then(lambda f: (f / "data" / "adsl.csv").write_bytes((f / "data" / "adsl.csv").read_bytes() + b"\x00"))
    with pytest.raises(StudyInputError) as info:
        load_study(s.write(tmp_path / "study"))
    text = str(info.value)
    assert "data/adeff.csv: row 1 the first line 'sep=|'" in text
    assert "data/adsl.csv: row 42 is not a text file" in text

"""The input corpus: real-lab and hostile specimen tables and study files (tests/corpus/), each
with its exact expected outcome, read the way the command line reads them.

A case is a file, the command-line options it is read with, and either the error (fragments
the one-line message must contain: the place and the fix) or the accepted result (counts,
populations, unit, and the warnings, each matched by one fragment, no more and no fewer).
Every case also goes through ``flawmix fit`` in-process: exit status 2 and one ``error:`` line
for errors, 0 for accepted tables, and never a Python warning from a library. See
DEVELOPERS.md ("The input corpus") for how to add one.
"""
from __future__ import annotations

import io
import json
import warnings
from contextlib import redirect_stderr, redirect_stdout
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from flawmix.cli import _load, build_parser, main
from flawmix.errors import FlawmixError, FlawmixWarning
from flawmix.specimens import check_estimable

CORPUS = Path(__file__).parent / "corpus"
BASE = dict(n=10, failed=9, survived=1, unidentified=1, ambiguous=1, populations=("inclusion", "pore"))
ROBUST = "estimation side (mle.py, the 'robust' work): the input side reads this table correctly"


@dataclass
class Case:
    """One corpus case. ``table`` and ``study`` are paths below tests/corpus (either may be
    missing: a study may name the table); ``args`` are further command-line options."""

    table: str | None
    args: tuple[str, ...] = ()
    study: str | None = None
    error: tuple[str, ...] | None = None       # fragments of the error message (besides the file name)
    result: dict | None = None                 # expected counts, populations, unit, excluded rows
    warns: tuple[str, ...] = ()                # one fragment per expected warning while reading
    fit_warns: tuple[str, ...] | None = None   # one fragment per warning about the populations (before a fit)
    fit_exit: int | None = None                # exit status of `flawmix fit` (default: 2 for errors, 0 else)
    fit_error: str | None = None               # a fragment of the fit's error, for tables read fine but not fittable
    fit_note: str | None = None                # why the fit's own outcome is not asserted here
    fit_fails_now: str | None = None           # estimation-side fault still open (strict xfail: remove when fixed)
    named: str | None = None                   # the file the message must name (default: the table)
    id: str = field(default="")

    def argv(self) -> list[str]:
        out = ["fit"]
        if self.table is not None:
            out.append(str(CORPUS / self.table))
        if self.study is not None:
            out += ["--study", str(CORPUS / self.study)]
        return out + list(self.args)


def ok(warns=(), **result) -> dict:
    return {"result": {"unit": "MPa", "uncertain": 0, "excluded": 0, **result}, "warns": tuple(warns)}


def err(*fragments) -> dict:
    return {"error": fragments}


CASES = [
    # ---- layouts ------------------------------------------------------------------------
    Case("layout/comma.csv", **ok(**BASE)),
    Case("layout/semicolon_decimal_comma.csv", **ok(**BASE)),
    Case("layout/tab.tsv", **ok(**BASE)),
    Case("layout/tab_decimal_comma.txt", **ok(**BASE)),
    Case("layout/crlf.csv", **ok(**BASE)),
    Case("layout/crlf_bad_row.csv", **err("line 6", "column 'strength'", "'x540' is not a number", "plain number in MPa")),
    Case("layout/extra_columns.csv", **ok(**BASE)),
    Case("layout/strength_only.csv", **ok(n=5, failed=5, survived=0, unidentified=5, ambiguous=0, populations=("all",))),
    Case("layout/geometry_column.csv", **ok(**BASE)),
    # a spreadsheet's first line 'sep=;' names the delimiter; the header is line 2
    Case("layout/sep_line.csv", **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=0,
                                     populations=("inclusion", "pore"))),
    Case("layout/sep_line_bad_row.csv", **err("line 5", "column 'strength'", "'3x98' is not a number")),
    Case("layout/cr_only.csv", **ok(n=3, failed=3, survived=0, unidentified=3, ambiguous=0, populations=("all",))),
    Case("layout/cr_only_bad_row.csv", **err("line 4", "column 'strength'", "'4x30' is not a number")),
    # ---- units in the header, --unit ----------------------------------------------------
    Case("header/unit_parentheses.csv", **ok(**BASE)),
    Case("header/unit_parentheses.csv", ("--unit", "MPa"), **ok(**BASE), id="same-unit-given"),
    Case("header/unit_parentheses.csv", ("--unit", "ksi"),
         **err("the header 'Strength (MPa)' says MPa but the unit ksi was asked for", "remove one of the two"),
         id="conflict-with-unit-option"),
    Case("header/unit_brackets_ksi.csv", **{**ok(**BASE), "result": {**ok(**BASE)["result"], "unit": "ksi"}}),
    Case("header/unit_slash_sigma.csv", **ok(**BASE)),
    Case("header/unit_gpa.csv", **{**ok(**BASE), "result": {**ok(**BASE)["result"], "unit": "GPa"}}),
    Case("header/unit_after_comma_semicolon.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                                        populations=("inclusion", "pore"))),
    Case("header/nbsp_before_unit.csv", **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=0,
                                             populations=("inclusion", "pore"))),
    Case("header/title_lines_above.csv", **err("line 4: this line looks like the header", "line 1 comes first",
                                               "delete the 3 line(s) above the header")),
    Case("excel/title_rows.xlsx", **err("[sheet 'Bars'], row 4: this row looks like the header", "row 1 comes first",
                                        "delete the 3 row(s) above the header")),
    Case("header/unit_unknown.csv", **err("line 1 (the header)", "column 'strength (N)'", "unknown stress unit 'N'",
                                          "give --unit")),
    Case("layout/comma.csv", ("--unit", "N/mm2"), **err("unknown stress unit 'N/mm2'", "use one of Pa, kPa, MPa"),
         named="", id="unknown-unit-option"),
    Case("header/implausible_ksi.csv", **ok(n=5, failed=5, survived=0, unidentified=5, ambiguous=0, populations=("all",))),
    Case("header/implausible_ksi.csv", ("--unit", "ksi"),
         **{**ok(("median strength 845 ksi = 5826 MPa is above the ~3 GPa that bulk ceramics and glasses reach; if the "
                  "numbers are in MPa, give --unit MPa",), n=5, failed=5,
                 survived=0, unidentified=5, ambiguous=0, populations=("all",)),
            "result": {"unit": "ksi", "n": 5, "failed": 5, "survived": 0, "unidentified": 5, "ambiguous": 0,
                       "populations": ("all",), "uncertain": 0, "excluded": 0}}, id="implausible-unit-warns"),
    # ---- headers --------------------------------------------------------------------------
    Case("header/duplicated_strength.csv", **err("line 1 (the header)", "columns 2 ('strength') and 4 ('strength') "
                                                 "are both 'strength'", "rename or remove one of them")),
    Case("header/case_duplicated.csv", **err("line 1 (the header)", "columns 2 ('Strength') and 4 ('strength')",
                                             "rename or remove one")),
    Case("header/duplicated_origin.csv", **err("columns 3 ('Origin') and 4 ('origin') are both 'origin'")),
    Case("header/no_strength_column.csv", **err("no 'strength' column (found: specimen, stress_at_break, origin)",
                                                "name the failure-stress column 'strength'")),
    Case("header/unnamed_column_with_values.csv", **err("line 3", "column '#3'", "no name in the header",
                                                        "name the column or remove the value")),
    # the names a lab writes: 'Specimen No.', 'Origin (fractography)' (a bracketed note dropped)
    Case("header/lab_names.csv", **ok(**BASE)),
    # two columns a lab might name for the origins: which one is meant is the user's call
    Case("header/two_origin_like_columns.csv", **err("line 1 (the header)", "columns 4 ('Fracture origin') and 5 "
                                                     "('Origin (SEM)') are both 'origin'", "rename or remove one")),
    # origins in a column not named as such: read as one population, and said so
    Case("header/origin_column_unnamed.csv",
         **ok(("no 'origin' column (not read: 'Bruchursprung')", ), n=5, failed=5, survived=0, unidentified=5,
              ambiguous=0, populations=("all",))),
    # a survivor written in a remarks column, without a status column: counted as failed, and said so
    Case("header/survivor_in_remarks.csv",
         **ok(("line 8, column 'remarks': 'survived, no fracture' (1 record(s): line 8) reads like a survivor",),
              n=7, failed=7, survived=0, unidentified=2, ambiguous=0, populations=("inclusion", "pore"))),
    Case("header/trailing_comma_on_header_and_rows.csv",
         **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=0, populations=("inclusion", "pore"))),
    # ---- empty and near-empty ---------------------------------------------------------------
    Case("empty/empty.csv", **err("the file is empty", "header line with at least 'strength'")),
    Case("empty/blank_lines_only.csv", **err("the file is empty")),
    Case("empty/header_only.csv", **err("the table has no specimens", "add one row per specimen")),
    Case("empty/header_and_blank_lines.csv", **err("the table has no specimens")),
    # ---- rows -----------------------------------------------------------------------------------
    Case("rows/short_row.csv", **err("line 5: 2 cells but the header (line 1) has 4", "add the missing cells")),
    Case("rows/long_row.csv", **err("line 8: 5 cells but the header (line 1) has 4", "remove the extra comma")),
    Case("rows/blank_lines_inside.csv", **ok(**BASE, excluded=3)),
    Case("rows/blank_lines_then_bad_strength.csv", **err("line 10", "column 'strength'", "'47O' is not a number")),
    Case("rows/leading_blank_lines.csv", **ok(**BASE)),
    Case("rows/delimiters_only_rows.csv", **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=0,
                                               populations=("inclusion", "pore"), excluded=2)),
    Case("rows/trailing_tab_every_row.tsv", **err("line 2: 4 cells but the header (line 1) has 3 (and 1 more line)",
                                                 "a tab at the end of the line")),
    Case("rows/leading_blank_lines_bad_row.csv", **err("line 6", "column 'strength'", "-455 is not positive")),
    # once shifted the columns and fitted the widths: now the extra comma is named
    Case("rows/trailing_comma_every_row.csv", **err("line 2: 4 cells but the header (line 1) has 3 (and 3 more lines)",
                                                   "a comma at the end of the line", "remove the extra comma")),
    Case("rows/trailing_comma_one_row.csv", **err("line 4: 4 cells but the header (line 1) has 3;",
                                                 "remove the extra comma")),
    Case("rows/quoted_commas.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                        populations=("inclusion, fe-rich", "pore", "pore, large"))),
    Case("rows/newline_in_cell.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                          populations=("inclusion", "pore"))),
    # the record of K04 starts on physical line 8: two cells above hold newlines
    Case("rows/newline_in_cell_then_bad.csv", **err("line 8", "column 'strength'", "'zero' is not a number")),
    Case("rows/unclosed_quote.csv", **err("not a readable table", "check the quotes")),
    Case("rows/duplicate_ids.csv", **err("line 7", "column 'specimen'", "duplicate specimen id 'K03' (first at line 4)",
                                         "make ids unique")),
    Case("rows/empty_id.csv", **err("line 6", "column 'specimen'", "empty specimen id")),
    Case("rows/excluded_rows.csv", **ok(n=8, failed=7, survived=1, unidentified=1, ambiguous=1,
                                        populations=("inclusion", "pore"), excluded=2)),
    # excluded rows are read and listed, not validated: their strengths may be missing or nonsense
    Case("rows/excluded_with_bad_strength.csv", **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=0,
                                                     populations=("inclusion", "pore"), excluded=3)),
    Case("rows/all_excluded.csv", **err("every row is excluded or blank")),
    # ---- strengths ----------------------------------------------------------------------------
    Case("strength/text.csv", **err("line 6", "column 'strength'", "'abc' is not a number", "plain number in MPa")),
    Case("strength/negative.csv", **err("line 6", "column 'strength'", "-5 is not positive", "must be > 0 MPa")),
    Case("strength/zero.csv", **err("line 6", "column 'strength'", "0 is not positive")),
    Case("strength/nan.csv", **err("line 6", "column 'strength'", "missing value", "or mark the row excluded")),
    Case("strength/missing.csv", **err("line 6", "column 'strength'", "missing value")),
    Case("strength/inf.csv", **err("line 6", "column 'strength'", "'inf' is not a finite number")),
    Case("strength/with_unit.csv", **err("line 6", "column 'strength'", "'300 MPa' is not a number",
                                         "write the unit once in the header ('strength (MPa)'")),
    Case("strength/quoted_decimal_comma.csv", **err("line 6", "column 'strength'", "'3,00' is not a number (a decimal "
                                                    "comma?); write 3.00", "semicolons")),
    Case("strength/unquoted_decimal_comma.csv", **err("line 6: 5 cells but the header (line 1) has 4")),
    Case("strength/inner_space.csv", **err("line 6", "column 'strength'", "'4 12' is not a number; write the stress "
                                           "as a plain number")),
    Case("strength/semicolon_thousands.csv", **err("line 3", "column 'strength'", "'1.234,5' is not a number "
                                                   "(thousands separators?)", "like 1234.5")),
    Case("strength/quoted_thousands.csv", **err("line 3", "column 'strength'", "'1,234' is not a number (a thousands "
                                                "separator, or a decimal comma?); write 1234 or 1.234")),
    Case("strength/number_forms.csv", **ok(n=5, failed=5, survived=0, unidentified=5, ambiguous=0,
                                           populations=("all",))),
    Case("strength/spaces_around.csv", **ok(**BASE)),
    Case("strength/underscore_digits.csv", **ok(n=3, failed=3, survived=0, unidentified=3, ambiguous=0,
                                                populations=("all",))),
    Case("strength/tiny_one.csv", **ok(# median of the ten: (470 + 497) / 2 = 483.5, and 483.5 / 1e-300 = 4.835e302
         ("line 6, column 'strength': strength 1e-300 is below the median 483.5 by a factor of 4.84e+302; check "
          "it for a typo",), **BASE),
         fit_note=ROBUST),
    Case("strength/huge_one.csv", **ok(# median of the ten: (497 + 512) / 2 = 504.5, and 1e300 / 504.5 = 1.982e297
         ("line 6, column 'strength': strength 1e+300 is above the median 504.5 by a factor of 1.98e+297; check "
          "it for a typo",), **BASE),
         fit_note=ROBUST),
    Case("strength/tiny_all.csv", **ok(("median strength 4.4e-300 MPa = 4.4e-300 MPa is below the ~1 MPa",), n=5, failed=5,
                                       survived=0, unidentified=5, ambiguous=0, populations=("all",)), fit_note=ROBUST),
    Case("strength/huge_all.csv", **ok(("median strength 4.4e+300 MPa = 4.4e+300 MPa is above the ~3 GPa",), n=5, failed=5,
                                       survived=0, unidentified=5, ambiguous=0, populations=("all",)), fit_note=ROBUST),
    Case("strength/identical.csv", **ok(n=8, failed=8, survived=0, unidentified=0, ambiguous=0,
                                        populations=("pore",)), fit_note=ROBUST),
    Case("strength/one_specimen.csv", **ok(n=1, failed=1, survived=0, unidentified=0, ambiguous=0,
                                           populations=("pore",)), fit_note=ROBUST),
    Case("strength/two_specimens.csv", **ok(n=2, failed=2, survived=0, unidentified=0, ambiguous=0,
                                            populations=("pore",)),
         fit_warns=("population 'pore' has only 2 failures attributed to it with certainty",)),
    # ---- status -------------------------------------------------------------------------------
    Case("status/unknown_word.csv", **err("line 8", "column 'status'", "unknown status 'broke'", "write 'failed', "
                                          "'survived'")),
    Case("status/odd_case.csv", **ok(n=9, failed=6, survived=3, unidentified=1, ambiguous=0,
                                     populations=("inclusion", "pore"))),
    Case("status/all_survivors.csv", **ok(n=3, failed=0, survived=3, unidentified=0, ambiguous=0,
                                          populations=("all",)), fit_exit=2,
         fit_error="population(s) 'all' have no failures, so no finite Weibull estimate exists"),
    Case("status/survivor_with_bad_origin.csv", **ok(n=3, failed=2, survived=1, unidentified=0, ambiguous=0,
                                                     populations=("pore",))),
    # ---- origins ------------------------------------------------------------------------------
    Case("origin/unidentified_words.csv", **ok(n=12, failed=12, survived=0, unidentified=10, ambiguous=0,
                                               populations=("pore",)),
         fit_warns=()),      # one population: an unidentified origin can only be that population
    Case("origin/separators.csv", **ok(n=6, failed=6, survived=0, unidentified=0, ambiguous=3,
                                       populations=("inclusion", "pore")),
         fit_warns=("population 'inclusion' has only 1 failure attributed to it with certainty",
                    "population 'pore' has only 2 failures attributed")),
    Case("origin/separators.csv", ("--origin-separator", "|"),
         **ok(("'pore / inclusion' (1) and 'pore or inclusion' (1) look like one origin",), n=6, failed=6,
              survived=0, unidentified=0, ambiguous=1,
              populations=("inclusion", "pore", "pore / inclusion", "pore or inclusion")), id="pipe-only"),
    Case("origin/uncertain.csv", **ok(("2 failure origin(s) written with a trailing '?'",), n=5, failed=5, survived=0,
                                      unidentified=0, ambiguous=0, uncertain=2, populations=("inclusion", "pore"))),
    Case("origin/uncertain.csv", ("--uncertain-origins", "unidentified"),
         **ok(n=5, failed=5, survived=0, unidentified=2, ambiguous=0, populations=("inclusion", "pore")),
         id="as-unidentified"),
    Case("origin/custom_unidentified_word.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                                     populations=("n.e.", "pore"))),
    Case("origin/custom_unidentified_word.csv", ("--unidentified-word", "N.E."),
         **ok(n=4, failed=4, survived=0, unidentified=2, ambiguous=0, populations=("pore",)), id="word-added"),
    Case("origin/custom_unidentified_word.csv", ("--group", "pores=pore,n.e.", "--unidentified-word", "n.e."),
         **err("population 'pores': label 'n.e.' is one of the words for 'unidentified'", "remove it from one of the "
               "two"), named="", id="word-also-a-label"),
    Case("origin/pipe_alone.csv", **err("line 3", "column 'origin'", "origin '|' has an empty alternative",
                                        "leave the cell empty for unidentified")),
    Case("origin/pipe_trailing.csv", **err("line 4", "column 'origin'", "origin 'pore|' has an empty alternative")),
    Case("origin/nfc_nfd.csv", **ok(n=5, failed=5, survived=0, unidentified=0, ambiguous=0,
                                    populations=("inclusi\u00f3n", "pore"))),
    # '/' is a separator, so '</script>' splits: shown in the origin table; the report escapes all of it
    Case("origin/html_script.csv", **ok(n=3, failed=3, survived=0, unidentified=0, ambiguous=2,
                                        populations=("<script>alert(1)<", "pore", "script>"))),
    # a zero-width space after one 'pore', a soft hyphen before another: one population
    Case("origin/zero_width_characters.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                                  populations=("inclusion", "pore"))),
    Case("origin/cjk_labels.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                       populations=("介在物", "気孔"))),
    Case("origin/typo_and_plural.csv", **ok(("'porosity' (5) and 'porosty' (1) look like one origin",
                                             "'inclusion' (4) and 'inclusions' (2) look like one origin"),
                                            n=12, failed=12, survived=0, unidentified=0, ambiguous=0,
                                            populations=("inclusion", "inclusions", "porosity", "porosty"))),
    Case("origin/looks_unknown.csv", **ok(("origin label 'not visible' (2 failure(s)) looks like 'not identified'",),
                                          n=4, failed=4, survived=0, unidentified=0, ambiguous=0,
                                          populations=("not visible", "pore"))),
    Case("origin/ambiguous_unknown_population.csv",
         ("--group", "pores=pore", "--group", "inclusions=inclusion"),
         **err("column 'origin'", "origin label(s) not in any population: 'chip' (line 3)",
               "add them to a population's labels")),
    Case("origin/ambiguous_unknown_population.csv", **ok(n=4, failed=4, survived=0, unidentified=0, ambiguous=1,
                                                         populations=("chip", "inclusion", "pore")),
         id="ungrouped"),
    Case("origin/every_decision.csv", ("--group", "pores=pore", "--group", "inclusions=inclusion,inclusión"),
         **ok(("1 failure origin(s) written with a trailing '?'",), n=12, failed=10, survived=2, unidentified=2,
              ambiguous=2, uncertain=1, populations=("pores", "inclusions"), excluded=1)),
    Case("origin/pore_or_unknown.csv", **ok(n=3, failed=3, survived=0, unidentified=1, ambiguous=0,
                                            populations=("inclusion", "pore"))),
    # 200 one-failure populations: reading is the input side's; fitting them is not asserted
    Case("origin/two_hundred_labels.csv", **ok(("200 distinct origin labels",), n=200, failed=200, survived=0,
                                               unidentified=0, ambiguous=0,
                                               populations=tuple(f"flaw type {i:03d}" for i in range(200))),
         fit_note="200 populations of one failure each: a fit of 400 parameters, not an input question"),
    Case("origin/populations_0_1_2.csv", **ok(n=9, failed=9, survived=0, unidentified=0, ambiguous=0,
                                              populations=("chip", "inclusion", "pore")),
         fit_warns=("population 'chip' has only 2 failures attributed to it with certainty (fewer than 5)",
                    "population 'inclusion' has only one failure")),
    Case("origin/one_failure_at_top.csv", **ok(n=6, failed=6, survived=0, unidentified=0, ambiguous=0,
                                               populations=("inclusion", "pore")), fit_note=ROBUST,
         fit_warns=("population 'inclusion' has one failure, at the highest stress of all specimens",)),
    Case("origin/failures_above_all_others.csv", **ok(n=8, failed=8, survived=0, unidentified=0, ambiguous=0,
                                                      populations=("inclusion", "pore")),
         fit_warns=("population 'inclusion' has only 3 failures attributed to it with certainty",)),
    # ---- encodings ------------------------------------------------------------------------------
    Case("encoding/utf8_bom.csv", **ok(n=5, failed=5, survived=0, unidentified=0, ambiguous=0,
                                       populations=("inclusión", "pore"))),
    Case("encoding/utf8_bom_semicolon.csv", **ok(n=5, failed=5, survived=0, unidentified=0, ambiguous=0,
                                                 populations=("inclusión", "pore"))),
    Case("encoding/utf16_le_bom.csv", **ok(n=5, failed=5, survived=0, unidentified=0, ambiguous=0,
                                           populations=("inclusión", "pore"))),
    Case("encoding/utf16_be_bom.csv", **ok(n=5, failed=5, survived=0, unidentified=0, ambiguous=0,
                                           populations=("inclusión", "pore"))),
    Case("encoding/latin1.csv", **err("byte offset 39 (line 2): byte 0xf3 is not UTF-8 text",
                                      "re-save the file as UTF-8")),
    Case("encoding/utf16_no_bom.csv", **err("byte offset 1: a NUL byte (UTF-16 without a byte-order mark",
                                            "re-save the file as UTF-8")),
    Case("encoding/nul_byte.csv", **err("byte offset 29: a NUL byte")),
    # ---- workbooks ------------------------------------------------------------------------------
    Case("excel/two_sheets.xlsx", **err("[sheet 'Notes']: no 'strength' column (found: campaign, operator)",
                                        "'Notes' (campaign, operator); 'Bars' (specimen, strength (MPa), origin, "
                                        "status)", "choose the sheet with --sheet NAME")),
    Case("excel/two_sheets.xlsx", ("--sheet", "Bars"), **ok(n=5, failed=4, survived=1, unidentified=1, ambiguous=0,
                                                            populations=("inclusion", "pore")), id="by-name"),
    Case("excel/two_sheets.xlsx", ("--sheet", "1"), **ok(n=5, failed=4, survived=1, unidentified=1, ambiguous=0,
                                                         populations=("inclusion", "pore")), id="by-number"),
    Case("excel/two_sheets.xlsx", ("--sheet", "2"), **err("no sheet number 2", "'Notes', 'Bars'"), id="no-number-2"),
    Case("excel/two_sheets.xlsx", ("--sheet", "Rods"), **err("no sheet 'Rods'; sheets: 'Notes', 'Bars'"),
         id="no-such-name"),
    Case("layout/comma.csv", ("--sheet", "Bars"), **err("applies to Excel workbooks only"), id="sheet-for-csv"),
    # blank rows above the header: the header is row 3, W3's strength 'n/a' is on row 6
    Case("excel/bad_cell.xlsx", **err("[sheet 'Bars'], row 6", "column 'strength (MPa)'", "missing value")),
    Case("excel/empty_sheet.xlsx", **err("sheet 'Empty' is empty", "'Bars' (specimen, strength (MPa), origin, "
                                         "status)")),
    Case("excel/empty_sheet.xlsx", ("--sheet", "Bars"), **ok(n=5, failed=4, survived=1, unidentified=1, ambiguous=0,
                                                             populations=("inclusion", "pore")), id="chosen"),
    Case("excel/truncated.xlsx", **err("the workbook is damaged", "save it again as .xlsx")),
    Case("excel/text_named_xlsx.xlsx", **err("not an .xlsx workbook", "export the sheet as CSV")),
    Case("excel/zip_not_workbook.xlsx", **err("a zip archive but not an .xlsx workbook")),
    # ---- what is given as the table -------------------------------------------------------------------
    Case("misc/folder.csv", **err("is a folder; give the specimen table file")),
    Case("misc/no_such_table.csv", **err("no such file; check the path")),
    # ---- study files ----------------------------------------------------------------------------
    Case("study/bars.csv", study="study/syntax_error.toml", named="syntax_error.toml",
         **err("not valid TOML", "line 2", "fix the line it names")),
    Case("study/bars.csv", study="study/unknown_key_labls.toml", named="unknown_key_labls.toml",
         **err("population 'pores': unknown setting 'labls' (did you mean 'labels'?)")),
    Case("study/bars.csv", study="study/unknown_top_key.toml", named="unknown_top_key.toml",
         **err("unknown key 'unti' (did you mean 'unit'?)")),
    # a population without labels takes its name as its one label
    Case("study/bars.csv", study="study/population_without_labels.toml",
         **ok(n=6, failed=6, survived=0, unidentified=0, ambiguous=0, populations=("pore", "inclusion"))),
    Case("study/bars.csv", study="study/population_empty_labels.toml", named="population_empty_labels.toml",
         **err("population 'pores': 'labels' must list its origin labels")),
    Case("study/bars.csv", study="study/label_in_two.toml", named="label_in_two.toml",
         **err("origin label 'inclusion' is given to both 'pores' and 'inclusions'; give it to one population")),
    Case("study/bars.csv", study="study/unidentified_label.toml", named="unidentified_label.toml",
         **err("label 'n.d.' means 'unidentified' and cannot belong to a population")),
    Case("study/bars.csv", study="study/unknown_kind.toml", named="unknown_kind.toml",
         **err("unknown flaw kind 'bulk'", "volume, surface, edge")),
    Case(None, study="study/unit_conflict.toml", named="unit_parentheses.csv",
         **err("says MPa but the unit ksi was asked for")),
    Case(None, study="study/vocabulary_keys.toml",
         **ok(n=4, failed=4, survived=0, unidentified=2, ambiguous=0, populations=("pore",))),
    Case("study/bars.csv", study="study/bad_separators.toml", named="bad_separators.toml",
         **err("key 'origin_separators' must be a list of text")),
    Case("study/bars.csv", study="study/populations_not_tables.toml", named="populations_not_tables.toml",
         **err("[populations.NAME] tables expected")),
    Case(None, study="study/missing_population_label.toml", named="ambiguous_unknown_population.csv",
         **err("origin label(s) not in any population: 'chip' (line 3)")),
    Case(None, study="study/zero_failure_population.toml", named="bars.csv", fit_exit=2,
         fit_error="population(s) 'chips' have no failures, so no finite Weibull estimate exists; remove them",
         **ok(n=6, failed=6, survived=0, unidentified=0, ambiguous=0, populations=("pores", "inclusions", "chips"))),
    Case(None, study="study/sheet_key.toml", **ok(n=5, failed=4, survived=1, unidentified=1, ambiguous=0,
                                                  populations=("inclusion", "pore"))),
    Case(None, study="study/sheet_not_a_name.toml", **err("key 'sheet' must be a sheet name"), named="sheet_not_a_name.toml"),
    Case("study/bars.csv", study="study/no_such_study.toml", named="no_such_study.toml",
         **err("no such study file; check the path")),
]


def _case_id(case: Case) -> str:
    name = case.table or case.study or "?"
    if case.study and case.table:
        name = case.study
    return name + (f"[{case.id}]" if case.id else "")


def _read(case: Case):
    """What the command line reads for this case: (study, specimens), or the FlawmixError."""
    args = build_parser().parse_args(case.argv())
    return _load(args)


@pytest.mark.parametrize("case", CASES, ids=_case_id)
def test_corpus_case_reads_as_expected(case):
    named = Path(case.table or "").name if case.named is None else case.named
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if case.error is not None:
            with pytest.raises(FlawmixError) as info:
                _read(case)
            message = str(info.value)
            assert "\n" not in message
            for fragment in (named, *case.error):
                assert fragment in message, f"{fragment!r} not in {message!r}"
        else:
            _, specimens = _read(case)
            _check_result(specimens, case)
    assert not caught, [str(w.message) for w in caught]


def _check_result(specimens, case: Case) -> None:
    want = case.result
    got = {"n": specimens.n_specimens, "failed": specimens.n_failed, "survived": specimens.n_survived,
           "unidentified": specimens.n_unidentified, "ambiguous": specimens.n_ambiguous,
           "uncertain": specimens.n_uncertain, "populations": specimens.population_names, "unit": specimens.unit,
           "excluded": specimens.accounting["excluded"]}
    assert got == want
    accounting = specimens.accounting
    assert accounting["used"] + accounting["excluded"] == accounting["rows_read"]
    assert accounting["used"] == specimens.n_specimens
    messages = list(specimens.warnings)
    assert len(messages) == len(case.warns), messages
    for fragment in case.warns:
        assert sum(fragment in m for m in messages) == 1, (fragment, messages)
    if case.fit_warns is not None:
        about_populations = check_estimable(specimens)[len(messages):]
        assert len(about_populations) == len(case.fit_warns), about_populations
        for fragment in case.fit_warns:
            assert sum(fragment in m for m in about_populations) == 1, (fragment, about_populations)


def _run_main(argv) -> tuple[int, str, str, list]:
    out, errors = io.StringIO(), io.StringIO()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with redirect_stdout(out), redirect_stderr(errors):
            code = main(argv)
    return code, out.getvalue(), errors.getvalue(), [w for w in caught if not issubclass(w.category, FlawmixWarning)]


@pytest.mark.parametrize("case", [c for c in CASES if c.fit_note is None], ids=_case_id)
def test_corpus_case_through_the_fit_command(case):
    """`flawmix fit` in-process: exit 2 and one 'error:' line, or exit 0 with JSON whose
    accounting matches; never a library warning."""
    code, out, errors, caught = _run_main([*case.argv(), "--json", "--quiet", "--intervals", "none"])
    expected = case.fit_exit if case.fit_exit is not None else (2 if case.error else 0)
    assert code == expected, errors
    assert "Traceback" not in errors and "internal error" not in errors
    assert not caught, [str(w.message) for w in caught]
    if code == 2:
        lines = errors.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), errors
        assert case.fit_error is None or case.fit_error in lines[0], errors
    else:
        data = json.loads(out)
        assert data["accounting"]["used"] == case.result["n"]
        assert data["accounting"]["excluded"] == case.result["excluded"]
        assert len(data["accounting"]["origins_as_written"]) >= 1


@pytest.mark.parametrize("case", [
    pytest.param(c, marks=pytest.mark.xfail(reason=f"{ROBUST}; still open: {c.fit_fails_now}", strict=True))
    if c.fit_fails_now else c for c in CASES if c.fit_note == ROBUST], ids=_case_id)
def test_estimation_side_cases_fit_cleanly(case):
    """What these tables must give once the estimation side handles them: exit 0, or one
    error line with exit 2; never an internal error or a library warning."""
    code, _, errors, caught = _run_main([*case.argv(), "--quiet"])    # default intervals, as a user runs it
    assert code in (0, 2) and "internal error" not in errors
    assert not caught, [str(w.message) for w in caught]


def test_corpus_has_every_file_under_test():
    """Each file of the corpus is used by a case (a file nobody reads is a case lost)."""
    used = {c.table for c in CASES} | {c.study for c in CASES}
    files = {str(p.relative_to(CORPUS)) for p in CORPUS.rglob("*") if p.is_file()
             and p.suffix in (".csv", ".tsv", ".txt", ".xlsx", ".toml") and p.parent.name != "folder.csv"}
    assert files - used == set()
    assert len(CASES) >= 60


# ---- the origin table: every vocabulary decision, in the API, the JSON and the report --------

EVERY_DECISION = [   # origin as written, read as, population, specimens: from origin/every_decision.csv by hand
    ("(empty)", "unidentified", "any (unidentified)", 1),
    ("n.d.", "unidentified", "any (unidentified)", 1),
    ("inclusion", "label", "inclusions", 1),
    ("inclusion?", "uncertain", "inclusions", 1),
    ("inclusio\u0301n (combining accents)", "label", "inclusions", 1),
    ("inclusi\u00f3n", "label", "inclusions", 1),
    ("Pore", "label", "pores", 1),
    ("pore", "label", "pores", 1),
    ("pore / inclusion", "ambiguous", "pores or inclusions", 1),
    ("pore|inclusion", "ambiguous", "pores or inclusions", 1),
    ("(survived)", "survivor", "—", 2),
]
GROUPS = ("--group", "pores=pore", "--group", "inclusions=inclusion,inclusión")


def test_origin_table_shows_every_decision(tmp_path):
    from types import SimpleNamespace

    from flawmix.fit import fit
    from flawmix.report import section_data

    _, specimens = _read(Case("origin/every_decision.csv", GROUPS))
    rows = [tuple(r) for r in specimens.origin_table().itertuples(index=False)]
    assert rows == EVERY_DECISION
    assert specimens.accounting["excluded_rows"] == [
        {"where": "line 14", "specimen": "D13", "reason": "status says excluded (not a valid test)"}]
    with pytest.warns(FlawmixWarning, match="trailing '\\?'"):
        data = fit(specimens, intervals="none").to_dict()["accounting"]
    assert [tuple(e.values()) for e in data["origins_as_written"]] == EVERY_DECISION
    assert (data["rows_read"], data["used"], data["excluded"]) == (13, 12, 1)
    html = "".join(section_data(SimpleNamespace(specimens=specimens), None, tmp_path))
    for written, decision, population, _ in EVERY_DECISION:
        for text in (written, decision, population):
            assert text.replace("&", "&amp;") in html
    assert "status says excluded (not a valid test)" in html
    table = (tmp_path / "origins.csv").read_text(encoding="utf-8")
    assert table.splitlines()[0] == "origin as written,read as,population,specimens" and "pore|inclusion" in table


def test_html_and_script_in_labels_and_ids_are_escaped_in_the_report(tmp_path):
    from types import SimpleNamespace

    from flawmix.report import section_data

    _, specimens = _read(Case("origin/html_script.csv"))
    html = "".join(section_data(SimpleNamespace(specimens=specimens), None, tmp_path))
    assert "<script" not in html and "&lt;script&gt;alert(1)&lt;" in html
    assert specimens.ids[0] == "<img src=x onerror=alert(1)>"      # read as written, escaped only on output


@pytest.mark.slow
def test_a_million_rows_are_read_and_an_error_in_the_last_names_its_line(tmp_path):
    """10^6 specimens, generated here (never in the repository): every row accounted for; the
    same file with one bad strength in its last row names physical line 1,000,001."""
    import numpy as np

    from flawmix.specimens import read_specimens

    n = 1_000_000
    rng = np.random.default_rng(20261203)
    strength = 400.0 * rng.weibull(8.0, n)
    origin = np.where(rng.random(n) < 0.5, "pore", np.where(rng.random(n) < 0.2, "n.d.", "inclusion"))
    lines = ["specimen,strength,origin"] + [f"S{i},{s:.3f},{o}" for i, (s, o) in enumerate(zip(strength, origin))]
    path = tmp_path / "million.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    specimens = read_specimens(path)
    assert specimens.n_specimens == n and specimens.accounting["used"] == n
    assert specimens.n_unidentified == int((origin == "n.d.").sum())
    assert specimens.population_names == ("inclusion", "pore")
    np.testing.assert_allclose(specimens.strength, np.round(strength, 3))
    lines[-1] = lines[-1].rsplit(",", 2)[0] + ",4OO,pore"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(FlawmixError, match=r"line 1000001, column 'strength': '4OO' is not a number"):
        read_specimens(path)


SUBPROCESS_CASES = ["encoding/latin1.csv", "excel/truncated.xlsx", "misc/folder.csv", "study/syntax_error.toml",
                    "rows/trailing_comma_every_row.csv"]


def test_errors_from_a_real_process_are_one_line_exit_2():
    """A few corpus errors through a real `python -m flawmix` process (exit status, stderr as
    the user sees it: no traceback, no library warning); the rest run in-process above."""
    import os
    import subprocess
    import sys

    chosen = [c for c in CASES if (c.study if c.table == "study/bars.csv" else c.table) in SUBPROCESS_CASES]
    assert len(chosen) == len(SUBPROCESS_CASES)
    for case in chosen:
        run = subprocess.run([sys.executable, "-m", "flawmix", *case.argv()], capture_output=True, text=True,
                             env={**os.environ, "PYTHONPATH": str(Path(__file__).parent.parent)})
        lines = run.stderr.strip().splitlines()
        assert run.returncode == 2 and run.stdout == "", run.stderr
        assert len(lines) == 1 and lines[0].startswith("error: ") and case.error[-1] in lines[0], run.stderr


@pytest.mark.parametrize("table", ["origin/cjk_labels.csv"])
def test_report_on_unusual_labels_has_no_library_warning(tmp_path, table):
    """CJK labels: the report draws and writes them without a warning from matplotlib (missing
    glyphs) or any other library (markup in labels: test_report and the escaping test above)."""
    code, _, errors, caught = _run_main(["report", str(CORPUS / table), "--out", str(tmp_path / "r"), "--no-compare",
                                         "--quiet"])
    assert code == 0, errors
    assert not caught, [f"{w.category.__name__}: {w.message}" for w in caught]
    assert "Glyph" not in errors and "RuntimeWarning" not in errors

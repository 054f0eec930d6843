"""Exported cells a spreadsheet would run as a formula are escaped; plain numbers stay numbers.

The dangerous leads (= + - @, tab, carriage return) are those of OWASP's "CSV Injection" page.
"""
import csv
import io

import pytest

from fleetsvc.csvsafe import csv_response, safe_cell, safe_filename


@pytest.mark.parametrize("text", [
    "=HYPERLINK(\"http://x.invalid\",\"open\")", "=1+1", "+1+1", "-1+1", "@SUM(A1:A2)",
    "\t=1+1", "\r=1+1", "-", "+44 20 7946 0000", "  =1+1", "=cmd|' /C calc'!A0",
])
def test_a_cell_a_spreadsheet_would_run_gets_a_leading_apostrophe(text):
    assert safe_cell(text) == "'" + text


@pytest.mark.parametrize("value, text", [
    ("-0.12", "-0.12"), ("+3", "+3"), ("-1.5e-3", "-1.5e-3"), ("-.5", "-.5"), (-0.12, "-0.12"),
    (-3, "-3"), (0.0, "0.0"), ("AB12 CDE", "AB12 CDE"), ("toe 0.1", "toe 0.1"), (None, ""),
    ("a=b", "a=b"), (True, "true"),
])
def test_plain_numbers_and_ordinary_text_are_written_as_they_are(value, text):
    assert safe_cell(value) == text


def test_a_non_finite_float_is_written_empty_rather_than_as_nan():
    assert safe_cell(float("nan")) == "" and safe_cell(float("inf")) == ""


def test_the_download_escapes_every_cell_and_keeps_negative_numbers_numeric():
    response = csv_response('plate "x"/../evil.csv', ["note", "toe_deg"],
                            [["=1+1", -0.12], ["@x", "-0.05"]])
    assert response["Content-Disposition"] == 'attachment; filename="plate-x-.-evil.csv"'
    text = response.content.decode("utf-8")
    assert text.startswith("\ufeff")
    rows = list(csv.reader(io.StringIO(text.lstrip("\ufeff"))))
    assert rows == [["note", "toe_deg"], ["'=1+1", "-0.12"], ["'@x", "-0.05"]]


def test_a_filename_of_only_unsafe_characters_falls_back_to_a_default():
    assert safe_filename("///") == "export.csv"

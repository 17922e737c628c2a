#!/usr/bin/env python3
"""Read a JUnit XML report with the Python standard library's XML parser
(xml.etree.ElementTree), for the Rust check
tests/tests/scenario_expectations.rs.

Usage: junit_check.py IN.json OUT.json

IN:  {"xml": str}   the report text
OUT: {"python": version, "root": tag of the root element,
      "suites": [{"name": str, "tests": int, "failures": int, "errors": int,
                  "cases": [{"classname": str, "name": str,
                             "failure": str or null, "error": str or null}]}]}

The attribute counts are read as written; the cases as found, so the Rust
side can compare the two. A report that is not well-formed XML makes the
parser raise, and the script fails.
"""
import json
import platform
import sys
import xml.etree.ElementTree as ET


def main():
    with open(sys.argv[1]) as f:
        text = json.load(f)["xml"]
    root = ET.fromstring(text.encode("utf-8"))
    suites = []
    for s in root.iter("testsuite"):
        cases = []
        for c in s.iter("testcase"):
            fail = c.find("failure")
            err = c.find("error")
            cases.append({
                "classname": c.get("classname"),
                "name": c.get("name"),
                "failure": None if fail is None else (fail.text or ""),
                "error": None if err is None else (err.text or ""),
            })
        suites.append({
            "name": s.get("name"),
            "tests": int(s.get("tests")),
            "failures": int(s.get("failures")),
            "errors": int(s.get("errors")),
            "cases": cases,
        })
    with open(sys.argv[2], "w") as f:
        json.dump({"python": platform.python_version(), "root": root.tag,
                   "suites": suites}, f)


main()

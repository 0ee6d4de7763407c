"""``--junit FILE`` on verify and board: one JUnit XML test case per check, made from the same JSON
the verb prints. The layout checked is the common JUnit XML that CI systems read (common practice:
``testsuites`` > ``testsuite`` with tests/failures/errors counts > ``testcase``, a ``failure`` or
``error`` child when a case did not pass), parsed with Python's own XML reader."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ElementTree

from conftest import refused, slip_one_product

from orbitfix.verify.cli.main import main

SMALL = ["--hours", "0.01", "--states", "5000", "--steps", "5000"]


def _suite(path) -> ElementTree.Element:
    root = ElementTree.parse(path).getroot()
    assert root.tag == "testsuites"
    (suite,) = root.findall("testsuite")
    cases = suite.findall("testcase")
    assert int(suite.get("tests")) == len(cases)
    assert int(suite.get("failures")) == sum(c.find("failure") is not None for c in cases)
    assert int(suite.get("errors")) == sum(c.find("error") is not None for c in cases)
    return suite


def test_a_passing_verify_writes_one_case_per_check(tmp_path, capsys) -> None:
    path = tmp_path / "out" / "verify.xml"
    code = main(["verify", "vanderpol", *SMALL, "--json", "--junit", str(path)])
    data = json.loads(capsys.readouterr().out)
    assert code == 0 and data["ok"]
    suite = _suite(path)
    names = [c.get("name") for c in suite.findall("testcase")]
    assert suite.get("failures") == "0" and suite.get("errors") == "0"
    assert "bit-exact on the host" in names and "start-up path against the float step map" in names
    # every drift run and every sanitized build of the JSON is a case of its own
    assert [n for n in names if n.startswith("drift from ")] == [
        f"drift from {run['start']}" for run in data["drift"]["runs"]]
    assert sum(n.startswith("bit-exact under the sanitizer") for n in names) == len(data["sanitized"])


def test_firmware_with_a_seeded_slip_fails_its_case(tmp_path, capsys) -> None:
    firmware = tmp_path / "fw"
    assert main(["gen", "vanderpol", "-o", str(firmware)]) == 0
    slip_one_product(firmware / "vanderpol.c")
    path = tmp_path / "verify.xml"
    code = main(["verify", "vanderpol", "--sources", str(firmware), "--skip-drift", *SMALL[2:],
                 "--junit", str(path)])
    capsys.readouterr()
    assert code == 1
    suite = _suite(path)
    failed = [c for c in suite.findall("testcase") if c.find("failure") is not None]
    assert [c.get("name") for c in failed] == ["bit-exact on the host"]
    assert "expected" in failed[0].find("failure").get("message")


def test_a_run_stopped_by_bad_input_still_writes_its_error(tmp_path, capsys) -> None:
    path = tmp_path / "verify.xml"
    refused(["verify", "no_such_model", "--junit", str(path)], capsys)
    suite = _suite(path)
    (case,) = suite.findall("testcase")
    assert "no_such_model" in case.find("error").get("message")


def test_an_unwritable_junit_file_is_refused_after_the_run(tmp_path, capsys) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("")
    err = refused(["verify", "vanderpol", "--skip-drift", *SMALL[2:], "--junit",
                   str(blocker / "verify.xml")], capsys)
    assert "--junit" in err


def test_board_on_the_host_writes_its_stream_case(tmp_path, capsys) -> None:
    path = tmp_path / "board.xml"
    code = main(["board", "vanderpol", "--board", "host", "--steps", "2000", "--junit", str(path)])
    capsys.readouterr()
    assert code == 0
    suite = _suite(path)
    cases = suite.findall("testcase")
    assert [c.get("name") for c in cases] == ["bit-exact stream on host", "self-test on host"]
    assert all(c.find("failure") is None for c in cases)

"""``junit.xml``: the policy verdict as JUnit XML, so a CI server shows each rule as a test.

One ``<testsuite name="probe policy">`` inside ``<testsuites>``, one ``<testcase>`` per rule
(``classname="probe.policy"``, ``name`` = the rule's name and subject). A failing rule carries
``<failure>`` whose message gives the measured value, its interval and the bound; an inconclusive
rule is ``<skipped>``, or a ``<failure>`` when the verdict was run with ``fail_on_inconclusive``.
The suite's ``tests``/``failures``/``skipped``/``errors`` attributes count exactly those elements.
Built with :mod:`xml.etree.ElementTree`; control characters are shown escaped, and any other
character XML 1.0 cannot carry is dropped.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping
from typing import Any

from .design import design_text
from .fmt import caution_of, rule_status, rule_summary, rule_title, visible_all

__all__ = ["render_junit"]

# XML 1.0 allows tab, newline, carriage return and these ranges; anything else cannot be parsed back
_NOT_XML = re.compile("[^\t\n\r\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def _x(text: Any) -> str:
    return _NOT_XML.sub("", "" if text is None else str(text))


def render_junit(report: Mapping) -> str:
    """Render the report's verdict as JUnit XML.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it.

    Returns
    -------
    str
        The XML document (UTF-8 declaration, ending with a newline). A report without a verdict
        gives a suite with no test cases. Control characters in the report's strings are shown
        escaped (:func:`~probe.report.fmt.visible`).
    """
    report = visible_all(report)
    verdict = report.get("verdict") or {}
    rules = verdict.get("rules") or []
    strict = bool(verdict.get("fail_on_inconclusive"))
    prov = report.get("provenance") or {}
    timings = prov.get("timings") or {}
    total = sum(v for v in timings.values() if isinstance(v, (int, float)) and math.isfinite(v))

    counts = {"tests": len(rules), "failures": 0, "errors": 0, "skipped": 0}
    cases = []
    for rule in rules:
        status = rule_status(rule)
        case = ET.Element(
            "testcase", {"classname": "probe.policy", "name": _x(rule_title(rule)), "time": "0"}
        )
        summary = _x(rule_summary(rule))
        if status == "fail" or (status == "inconclusive" and strict):
            counts["failures"] += 1
            kind = "policy-violation" if status == "fail" else "policy-inconclusive"
            prefix = "" if status == "fail" else "inconclusive (counted as a failure): "
            failure = ET.SubElement(case, "failure", {"message": prefix + summary, "type": kind})
            failure.text = prefix + summary
        elif status == "inconclusive":
            counts["skipped"] += 1
            ET.SubElement(case, "skipped", {"message": "inconclusive: " + summary})
        else:
            out = ET.SubElement(case, "system-out")
            out.text = summary
        cases.append(case)

    attrs = {k: str(v) for k, v in counts.items()}
    root = ET.Element("testsuites", {"name": "probe", **attrs, "time": f"{total:.3f}"})
    suite_attrs = {"name": "probe policy", **attrs, "time": f"{total:.3f}"}
    if prov.get("created"):
        suite_attrs["timestamp"] = _x(prov["created"])
    suite = ET.SubElement(root, "testsuite", suite_attrs)
    props = ET.SubElement(suite, "properties")
    model = prov.get("model") or {}
    data = prov.get("data") or {}
    for name, value in (
        ("caution", caution_of(report)),
        ("design", design_text(report) or None),
        ("verdict.passed", verdict.get("passed")),
        ("verdict.fail_on_inconclusive", strict),
        ("model.spec", model.get("spec")),
        ("model.sha256", model.get("sha256")),
        ("data.path", data.get("path")),
        ("data.sha256", data.get("sha256")),
        ("plan_sha256", prov.get("plan_sha256")),
        ("seed", prov.get("seed")),
        ("probe_version", prov.get("probe_version")),
    ):
        if value is not None:
            text = str(value).lower() if isinstance(value, bool) else value
            ET.SubElement(props, "property", {"name": name, "value": _x(text)})
    suite.extend(cases)
    ET.indent(root)
    return ET.tostring(root, encoding="unicode", xml_declaration=False).join(
        ['<?xml version="1.0" encoding="UTF-8"?>\n', "\n"]
    )

"""``report.html``: one self-contained page rendered from the report dict.

Inline CSS, inline SVG pictures (see :mod:`probe.report.svg`), no script, no external URL, so the
file can be mailed, archived or opened offline. Order: caution, verdict, groups, slices, flips,
comparison, provenance. Every user string goes through :func:`html.escape`. Wide tables scroll
sideways on narrow screens; colours are light and the page prints cleanly.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping, Sequence
from html import escape
from typing import Any

from . import svg
from .markdown import (
    bound_text,
    caution_of,
    confidence_text,
    fmt_count,
    fmt_interval,
    fmt_num,
    fmt_p,
    fmt_share,
    metric_name,
    rule_status,
    slice_label,
    status_counts,
    verdict_word,
)

__all__ = ["render_html"]

_CSS = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: #fff; color: #1f2328; line-height: 1.45;
  font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1120px; margin: 0 auto; padding: 1.25rem 1rem 3rem; }
h1 { font-size: 1.6rem; margin: 0 0 .25rem; }
h2 { font-size: 1.3rem; margin: 2.2rem 0 .6rem; padding-bottom: .25rem; border-bottom: 1px solid #d0d7de; }
h3 { font-size: 1.05rem; margin: 1.4rem 0 .4rem; }
p { margin: .4rem 0 .8rem; }
.meta { color: #57606a; font-size: .9rem; overflow-wrap: anywhere; }
nav { font-size: .9rem; margin: .6rem 0 0; display: flex; flex-wrap: wrap; gap: .2rem .9rem; }
nav a { color: #0b5cad; }
.caution { border-left: 4px solid #bf8700; background: #fff8e1; padding: .6rem .9rem; margin: 1rem 0; }
.verdict { display: inline-block; padding: .1rem .6rem; border-radius: 4px; font-weight: 700; }
.v-pass { background: #dafbe1; color: #116329; border: 1px solid #4ac26b; }
.v-fail { background: #ffebe9; color: #a40e26; border: 1px solid #ff8182; }
.v-inconclusive, .v-none { background: #fff8c5; color: #7d4e00; border: 1px solid #d4a72c; }
.st { font-weight: 600; white-space: nowrap; }
.st-pass { color: #116329; } .st-fail { color: #a40e26; } .st-inconclusive { color: #7d4e00; }
.table-wrap { overflow-x: auto; margin: .4rem 0 1rem; -webkit-overflow-scrolling: touch; }
table { border-collapse: collapse; font-size: .88rem; font-variant-numeric: tabular-nums; }
th, td { padding: .3rem .45rem; border-bottom: 1px solid #e4e7eb; text-align: left; vertical-align: top; }
th { background: #f6f8fa; font-weight: 600; white-space: nowrap; }
td.num, th.num { text-align: right; white-space: nowrap; }
td.label { min-width: 10rem; max-width: 28rem; overflow-wrap: break-word; }
td.text { min-width: 14rem; }
tr.fail td { background: #fff5f5; }
.ci { color: #57606a; font-size: .92em; }
caption { text-align: left; padding: 0 0 .2rem; caption-side: top; }
.flag { color: #a40e26; font-weight: 700; }
.small { color: #57606a; font-size: .8rem; }
figure { margin: .6rem 0 1rem; overflow-x: auto; }
svg.plot { max-width: 100%; min-width: 560px; height: auto; display: block; }
code, pre { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: .85rem; }
code { overflow-wrap: anywhere; }
code.name { overflow-wrap: normal; white-space: nowrap; }
pre { background: #f6f8fa; padding: .6rem .8rem; overflow-x: auto; border-radius: 4px; }
ol.sentences li, ul.sentences li { margin: .15rem 0; }
table.kv th { text-align: left; width: 11rem; }
footer { margin-top: 2.5rem; color: #57606a; font-size: .85rem; }
@media (max-width: 640px) { body { font-size: 14px; } main { padding: .8rem .6rem 2rem; } }
@media print {
  body { font-size: 11pt; } main { max-width: none; padding: 0; }
  nav { display: none; }
  h2 { break-after: avoid; } figure, tr { break-inside: avoid; }
  .table-wrap { overflow: visible; }
  .caution, th, tr.fail td, .verdict { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""


def _e(text: Any) -> str:
    return escape("" if text is None else str(text), quote=True)


def _ok(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _est(est: Mapping | None, digits: int = 3) -> str:
    """``value [low, high]`` with the interval in a lighter span."""
    if not est or not _ok(est.get("value")):
        return '<span class="ci">n/a</span>'
    interval = fmt_interval(est, digits)
    value = fmt_num(est["value"], digits)
    return value if interval == "n/a" else f'{value} <span class="ci">{interval}</span>'


def _table(
    header: Sequence[str],
    rows: Iterable[Sequence[str]],
    *,
    num: str = "",
    row_classes: Sequence[str] | None = None,
    caption: str = "",
) -> str:
    """A table in a sideways-scrolling wrapper; cells are HTML already.

    ``num`` has one letter per column: ``r`` numeric (right-aligned, no wrap), ``t`` a label that may
    wrap anywhere, ``w`` running text with a minimum width, ``l`` plain.
    """
    num = num.ljust(len(header), "l")
    classes = {"r": ' class="num"', "t": ' class="label"', "w": ' class="text"'}
    cls = lambda j: classes.get(num[j], "")
    head = "".join(
        f'<th scope="col"{cls(j) if num[j] == "r" else ""}>{h}</th>' for j, h in enumerate(header)
    )
    body = []
    for i, row in enumerate(rows):
        rc = f' class="{row_classes[i]}"' if row_classes and row_classes[i] else ""
        body.append(
            f"<tr{rc}>" + "".join(f"<td{cls(j)}>{c}</td>" for j, c in enumerate(row)) + "</tr>"
        )
    cap = f'<caption class="small">{caption}</caption>' if caption else ""
    return (
        f'<div class="table-wrap"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>"
    )


def _status(status: str) -> str:
    mark = {"pass": "✓", "fail": "✗", "inconclusive": "?"}[status]
    return f'<span class="st st-{status}">{mark} {status}</span>'


def _verdict(report: Mapping) -> str:
    verdict = report.get("verdict") or {}
    rules = verdict.get("rules") or []
    word = verdict_word(verdict)
    css = {"PASSED": "pass", "FAILED": "fail", "INCONCLUSIVE": "inconclusive"}.get(word, "none")
    out = [f'<section id="verdict"><h2>Verdict: <span class="verdict v-{css}">{word}</span></h2>']
    if not rules:
        return "".join(out) + "<p>No policy rules were checked.</p></section>"
    c = status_counts(rules)
    inc = f"{c['inconclusive']} inconclusive"
    if c["inconclusive"]:
        inc += (
            " (counted as failures)"
            if verdict.get("fail_on_inconclusive")
            else " (not counted as failures)"
        )
    out.append(
        f"<p>{len(rules)} rules: {c['pass']} passed, {c['fail']} failed, {inc}. Each rule is judged on "
        f"the {confidence_text(report)} interval: it passes only when the whole interval is on the right "
        "side of the bound.</p>"
    )
    order = {"fail": 0, "inconclusive": 1, "pass": 2}
    ranked = sorted(rules, key=lambda r: order[rule_status(r)])
    by_name: dict = {}
    for r in ranked:
        by_name.setdefault(r.get("name"), []).append(r)
    summary = []
    for name, group in by_name.items():
        counts = status_counts(group)
        tally = ", ".join(f"{counts[k]} {k}" for k in ("fail", "inconclusive", "pass") if counts[k])
        summary.append([_status(rule_status(group[0])), f'<code class="name">{_e(name)}</code>',
                        _e(bound_text(group[0])), tally, _e(group[0].get("subject"))])
    out.append(_table(["worst", "rule", "bound", "subjects", "worst subject"], summary,
                      num="llllw"))
    out.append(f"<details><summary>All {len(rules)} rule checks</summary>")
    out.append(
        _table(
            ["status", "rule", "subject", "measured", "interval", "bound", "note"],
            (
                [
                    _status(rule_status(r)),
                    f'<code class="name">{_e(r.get("name"))}</code>',
                    _e(r.get("subject")),
                    fmt_num((r.get("value") or {}).get("value"), 4),
                    fmt_interval(r.get("value"), 4),
                    _e(bound_text(r)),
                    _e(r.get("message")),
                ]
                for r in ranked
            ),
            num="lltrrrw",
            row_classes=["fail" if rule_status(r) == "fail" else "" for r in ranked],
        )
    )
    return "".join(out) + "</details></section>"


def _groups(report: Mapping) -> str:
    groups = report.get("groups")
    out = ['<section id="groups"><h2>Groups</h2>']
    if groups is None:
        return "".join(out) + "<p>Not run.</p></section>"
    if not groups:
        return "".join(out) + "<p>No groups.</p></section>"
    out.append(
        f"<p>Rates with {confidence_text(report)} intervals. The impact ratio is the group's selection "
        'rate over the reference group\'s; <span class="flag">⚑</span> marks a ratio below 0.8 (the '
        "four-fifths rule of thumb). SPD is the difference in selection rate and EOD the difference in "
        "true-positive rate, both against the reference group. <em>small</em> marks a group under 2 % "
        "of the rows.</p>"
    )
    by_attr: dict[str, list[Mapping]] = {}
    for g in groups:
        by_attr.setdefault(str(g.get("attribute")), []).append(g)
    unknown = report.get("groups_unknown") or {}
    for k, (attribute, rows) in enumerate(by_attr.items()):
        ref = rows[0].get("reference_group")
        note = (
            f"Reference group: <strong>{_e(ref)}</strong>."
            if ref is not None
            else "No reference group."
        )
        if unknown.get(attribute):
            note += (
                f" {fmt_count(unknown[attribute])} rows with this attribute missing are left out."
            )
        out.append(f"<h3>{_e(attribute)}</h3><p>{note}</p>")
        out.append(f"<figure>{svg.group_rates(attribute, rows, uid=f'groups-{k}')}</figure>")
        name = lambda g: (
            _e(g.get("group")) + (' <span class="small">(small)</span>' if g.get("small") else "")
        )
        out.append(
            _table(
                ["group", "rows", "share", "selection rate", "impact ratio", "4/5", "SPD"],
                (
                    [
                        name(g),
                        fmt_count(g.get("rows")),
                        fmt_share(g.get("share")),
                        _est(g.get("selection_rate")),
                        _est(g.get("impact_ratio")),
                        '<span class="flag" title="impact ratio below 0.8">⚑</span>'
                        if g.get("four_fifths_flag")
                        else "",
                        _est(g.get("spd")),
                    ]
                    for g in rows
                ),
                num="trrrrlr",
                caption=f"Selection by {_e(attribute)}",
            )
        )
        out.append(
            _table(
                ["group", "error rate", "TPR", "FPR", "FNR", "PPV", "EOD"],
                (
                    [name(g)]
                    + [_est(g.get(k)) for k in ("error_rate", "tpr", "fpr", "fnr", "ppv", "eod")]
                    for g in rows
                ),
                num="trrrrrr",
                caption=f"Errors by {_e(attribute)}",
            )
        )
    return "".join(out) + "</section>"


def _slice_table(found: Sequence[Mapping]) -> str:
    return _table(
        ["rank", "slice", "rows", "share", "rate [low, high]", "gap [low, high]", "q"],
        (
            [
                _e(f.get("rank", i)),
                _e(slice_label(f)),
                fmt_count(f.get("rows")),
                fmt_share(f.get("share")),
                _est(f.get("rate")),
                _est(f.get("gap")),
                fmt_p(f.get("q_value")),
            ]
            for i, f in enumerate(found, 1)
        ),
        num="rtrrrrr",
    )


def _sentences(items: Sequence[Mapping], tag: str = "ol") -> str:
    lis = [f"<li>{_e(it['sentence'])}</li>" for it in items if it.get("sentence")]
    return f'<{tag} class="sentences">{"".join(lis)}</{tag}>' if lis else ""


def _slices(report: Mapping) -> str:
    s = report.get("slices")
    out = ['<section id="slices"><h2>Slices</h2>']
    if s is None:
        return "".join(out) + "<p>Not run.</p></section>"
    metric = _e(metric_name(s.get("metric")))
    found = s.get("found") or []
    out.append(
        f"<p>Where the {metric} is worst. Overall {metric} {_est(s.get('overall'))}; "
        f"{fmt_count(s.get('tested'))} slices tested on {fmt_count(s.get('search_rows'))} rows, rates "
        f"and q-values (Benjamini–Hochberg) re-estimated on {fmt_count(s.get('estimate_rows'))} held-out "
        "rows. The gap is the slice's rate minus the rate of the rest.</p>"
    )
    if not found:
        return "".join(out) + "<p>No slice stood out.</p></section>"
    out.append(f"<figure>{svg.slice_forest(s, uid='slices')}</figure>")
    out.append(_slice_table(found))
    out.append(_sentences(found))
    return "".join(out) + "</section>"


def _flips(report: Mapping) -> str:
    flips = report.get("flips")
    out = ['<section id="flips"><h2>Counterfactual flips</h2>']
    if flips is None:
        return "".join(out) + "<p>Not run.</p></section>"
    if not flips:
        return "".join(out) + "<p>No flip tests.</p></section>"
    out.append(
        "<p>The share of decisions that change when the attribute (direct), also the features that "
        "stand in for it (transport), or the person's nearest twins in the other group (twins) are "
        "considered.</p>"
    )
    out.append(f"<figure>{svg.flip_rates(flips, uid='flips')}</figure>")

    def row(f: Mapping) -> list[str]:
        if f.get("impossible"):
            rest = ['<span class="ci">not possible</span>', "", "", ""]
        else:
            rest = [
                _est(f.get(k))
                for k in ("flip_rate", "to_favorable", "to_unfavorable", "mean_score_change")
            ]
        return [
            _e(f.get("attribute")),
            _e(f.get("mode")),
            f"{_e(f.get('from'))} → {_e(f.get('to'))}",
            fmt_count(f.get("rows")),
            *rest,
        ]

    out.append(
        _table(
            [
                "attribute",
                "mode",
                "change",
                "rows",
                "flip rate",
                "to favourable",
                "to unfavourable",
                "mean score change",
            ],
            (row(f) for f in flips),
            num="lllrrrrr",
        )
    )
    out.append(_sentences(flips, "ul"))
    concentrated = [(f, s) for f in flips for s in (f.get("by_slice") or [])[:3]]
    if concentrated:
        out.append("<h3>Where the flips concentrate</h3><p>For each flip test, the slices of the "
                   "other columns with the highest flip rates. These were picked for being high, so their "
                   "intervals overstate how certain each is.</p>")
        out.append(_table(
            ["attribute", "mode", "change", "slice", "rows", "flip rate"],
            ([_e(f.get("attribute")), _e(f.get("mode")), f"{_e(f.get('from'))} → {_e(f.get('to'))}",
              _e(s.get("label")), fmt_count(s.get("rows")), _est(s.get("flip_rate"))]
             for f, s in concentrated),
            num="llllrr",
        ))
    return "".join(out) + "</section>"


def _proxies(report: Mapping) -> str:
    """Proxy rankings, one table per attribute; nothing when the section was not run."""
    proxies = report.get("proxies")
    if not proxies:
        return ""
    out = ['<section id="proxies"><h2>Proxies</h2>',
           "<p>How well each feature alone stands in for the protected attribute (mutual "
           "information, cross-fitted single-feature AUC) and how much the features together rely on "
           "it (permutation importance in a model predicting the attribute).</p>"]
    for p in proxies:
        out.append(f"<h3>{_e(p.get('attribute'))}</h3>")
        auc = p.get("multivariate_auc")
        if auc:
            out.append(f"<p>All features together predict it with AUC {_est(auc)}.</p>")
        out.append(_table(
            ["#", "feature", "mutual information", "AUC alone", "importance"],
            ([str(i), _e(r.get("feature")), fmt_num(r.get("mutual_information")),
              fmt_num(r.get("auc")), fmt_num(r.get("importance"))]
             for i, r in enumerate(p.get("features") or [], start=1)),
            num="rlrrr",
        ))
    return "".join(out) + "</section>"


def _comparison(report: Mapping) -> str:
    c = report.get("comparison")
    out = ['<section id="comparison"><h2>Comparison with the baseline</h2>']
    if c is None:
        return "".join(out) + "<p>Not run.</p></section>"
    base = c.get("baseline") or {}
    out.append(
        f"<p>Baseline <code>{_e(base.get('spec'))}</code> ({_e(base.get('kind'))}, SHA-256 "
        f"<code>{_e(base.get('sha256'))}</code>). Differences are candidate minus baseline, on the same "
        "rows.</p>"
    )
    metrics = c.get("metrics") or []
    if metrics:
        out.append(
            _table(
                ["metric", "candidate", "baseline", "difference", "p", "test"],
                (
                    [
                        _e(m.get("metric")),
                        _est(m.get("candidate")),
                        _est(m.get("baseline")),
                        _est(m.get("difference")),
                        fmt_p(m.get("p_value")),
                        _e(m.get("test")),
                    ]
                    for m in metrics
                ),
                num="lrrrrl",
            )
        )
    worse = c.get("worse_slices") or []
    out.append("<h3>Slices where the candidate is worse</h3>")
    out.append(_slice_table(worse) + _sentences(worse) if worse else "<p>None found.</p>")
    return "".join(out) + "</section>"


def _provenance(report: Mapping) -> str:
    p = report.get("provenance") or {}
    model = p.get("model") or {}
    data = p.get("data") or {}
    code = lambda x: f"<code>{_e(x)}</code>" if x not in (None, "") else "n/a"
    timings = p.get("timings") or {}
    rows = [
        ("probe version", _e(p.get("probe_version"))),
        ("created", _e(p.get("created"))),
        ("command", code(p.get("command"))),
        ("seed", _e(p.get("seed"))),
        ("confidence level", _e(p.get("confidence_level"))),
        ("model", f"{code(model.get('spec'))} ({_e(model.get('kind'))})"),
        ("model SHA-256", code(model.get("sha256"))),
        ("model score", _e(model.get("score"))),
        ("model features", _e(", ".join(map(str, model.get("feature_names") or [])))),
        ("data", f"{code(data.get('path'))}, {fmt_count(data.get('rows'))} rows"),
        ("data SHA-256", code(data.get("sha256"))),
        ("plan SHA-256", code(p.get("plan_sha256"))),
        ("versions", _e(", ".join(f"{k} {v}" for k, v in (p.get("versions") or {}).items()))),
        (
            "timings",
            _e(", ".join(f"{k} {v:.2f} s" if _ok(v) else f"{k} n/a" for k, v in timings.items())),
        ),
    ]
    body = "".join(f'<tr><th scope="row">{k}</th><td>{v}</td></tr>' for k, v in rows)
    out = [
        (
            f'<section id="provenance"><h2>Provenance</h2><div class="table-wrap"><table class="kv">'
            f"<tbody>{body}</tbody></table></div>"
        )
    ]
    if p.get("plan") is not None:
        plan = json.dumps(p["plan"], indent=2, ensure_ascii=False, default=str)
        out.append(
            f"<details open><summary>The plan as run</summary><pre>{_e(plan)}</pre></details>"
        )
    return "".join(out) + "</section>"


def render_html(report: Mapping) -> str:
    """Render a ``probe.report/1`` dict as one self-contained HTML page.

    Parameters
    ----------
    report : dict
        The report dict, exactly as ``report.json`` holds it. Sections that were not run are null.

    Returns
    -------
    str
        An HTML5 document with inline CSS and inline SVG pictures (group selection rates with the
        four-fifths line, a forest plot of the top slices, flip rates), no script and no external
        reference. Every user string is escaped.
    """
    p = report.get("provenance") or {}
    model = (p.get("model") or {}).get("spec")
    data = (p.get("data") or {}).get("path")
    word = verdict_word(report.get("verdict"))
    meta = " · ".join(
        x
        for x in (
            f"model <code>{_e(model)}</code>" if model else "",
            f"data <code>{_e(data)}</code>" if data else "",
            f"created {_e(p.get('created'))}" if p.get("created") else "",
            f"probe {_e(p.get('probe_version'))}" if p.get("probe_version") else "",
        )
        if x
    )
    nav = "".join(
        f'<a href="#{k}">{v}</a>'
        for k, v in (
            ("verdict", "Verdict"),
            ("groups", "Groups"),
            ("slices", "Slices"),
            ("flips", "Flips"),
            *((("proxies", "Proxies"),) if report.get("proxies") else ()),
            ("comparison", "Comparison"),
            ("provenance", "Provenance"),
        )
    )
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>probe report: {word}</title>",
        f"<style>{_CSS}</style></head><body><main>",
        f'<header><h1>probe report</h1><p class="meta">{meta}</p><nav>{nav}</nav></header>',
        f'<aside class="caution" role="note"><strong>Caution.</strong> {_e(caution_of(report))}</aside>',
        _verdict(report),
        _groups(report),
        _slices(report),
        _flips(report),
        _proxies(report),
        _comparison(report),
        _provenance(report),
        f"<footer><p><strong>Caution.</strong> {_e(caution_of(report))}</p></footer>",
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"

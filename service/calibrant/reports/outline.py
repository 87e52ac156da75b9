"""The report document as an ordered list of sections of paragraphs, tables and charts.

HTML and PDF both render this one outline, so the two forms always carry the same sections,
figures and wording; only the typesetting differs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from reportlab.graphics.shapes import Drawing

from calibrant.reports import charts

Cell = str


@dataclass
class Table:
    header: list[str]
    rows: list[list[Cell]]


@dataclass
class Section:
    anchor: str
    title: str
    blocks: list[str | Table | Drawing] = field(default_factory=list)


def fmt(value: Any) -> str:
    """A figure as printed: none as an em dash, integers whole, other numbers to 4 decimals
    (or 4 significant digits when smaller than 0.001 in size)."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.4f}" if value == 0 or abs(value) >= 0.001 else f"{value:.4g}"
    if isinstance(value, list) and len(value) == 2 and all(isinstance(v, int | float) for v in value):
        return f"[{fmt(value[0])}, {fmt(value[1])}]"
    return str(value)


WEEK_COLUMNS = ("log_loss", "brier", "calibration_slope", "calibration_intercept", "oe_ratio", "auc", "psi")
COMPLETENESS_COLUMNS = ("n_predictions", "n_labeled", "n_immature", "label_coverage")
TABLE_COLUMNS = ("n_predictions", "n_labeled", "log_loss", "brier", "calibration_slope", "auc", "psi")


def outline(doc: dict[str, Any]) -> list[Section]:
    return [
        _summary(doc), _plan(doc), _tolerances(doc), _weekly(doc), _calibration(doc), _breakdown(doc),
        _alarms(doc), _completeness(doc), _deliveries(doc), _in_force(doc), _changes(doc), _restatements(doc),
    ]


def _summary(doc: dict[str, Any]) -> Section:
    overall = doc["overall"]
    return Section("summary", "Summary", [
        (f"Model {doc['model']}: predictions scored from {doc['start']} to {doc['end']} (end excluded), "
         f"as known to the service at {doc['as_of']}."),
        Table(["figure", "value", "95 % interval"], [
            [key, fmt(overall.get(key)), fmt(overall.get(f"{key}_ci"))]
            for key in ("n_predictions", "n_labeled", "log_loss", "brier", "calibration_slope",
                        "calibration_intercept", "oe_ratio", "ece", "auc", "psi")
        ]),
        (f"Content hash (SHA-256 of the reproducible body): {doc['content_hash']}. "
         f"Snapshot {doc['snapshot_id']}, generated {doc['generated_at']}."),
        doc["caution"],
    ])


def _plan(doc: dict[str, Any]) -> Section:
    plan = doc.get("plan")
    if not plan:
        return Section("plan", "Monitoring plan", ["No monitoring plan was in force at as_of."])
    return Section("plan", "Monitoring plan", [
        f"Version {plan['version']}, recorded {plan['recorded_at']} by {plan['recorded_by']}.",
        Table(["item", "value"], [
            ["owner", plan["owner"]], ["intended use", plan["intended_use"]],
            ["outcome definition", plan["outcome_definition"]],
            ["horizon (days)", fmt(plan.get("horizon_days"))],
            ["review cadence", plan["review_cadence"]], ["escalation contact", plan["escalation_contact"]],
        ]),
    ])


def _tolerances(doc: dict[str, Any]) -> Section:
    section = Section("tolerances", "Metrics against tolerances")
    checks = doc["tolerances"]
    if not checks:
        section.blocks.append("The plan in force sets no tolerances.")
    else:
        section.blocks.append(Table(
            ["metric", "lower", "upper", "rule", "value", "95 % interval", "within", "interval meets range",
             "weeks outside"],
            [[t["metric"], fmt(t.get("lower")), fmt(t.get("upper")), t["rule"], fmt(t["value"]), fmt(t["ci"]),
              fmt(t["within"]), fmt(t["interval_overlaps"]), str(len(t["weeks_outside"]))] for t in checks]))
    drawn = set()
    for t in checks:
        if t["metric"] not in drawn:
            drawn.add(t["metric"])
            section.blocks.append(charts.weekly_metric(doc["periods"], t["metric"], lower=t.get("lower"),
                                                       upper=t.get("upper")))
    if "log_loss" not in drawn:
        section.blocks.append(charts.weekly_metric(doc["periods"], "log_loss"))
    return section


def _weekly(doc: dict[str, Any]) -> Section:
    return Section("weeks", "Figures per week", [Table(
        ["week from", *WEEK_COLUMNS],
        [[str(p["start"])[:10], *(fmt(p.get(k)) for k in WEEK_COLUMNS)] for p in doc["periods"]])])


def _calibration(doc: dict[str, Any]) -> Section:
    diagram = doc["reliability"]
    return Section("calibration", "Calibration", [
        charts.reliability(diagram),
        Table(["bin", "count", "mean predicted", "observed rate", "95 % interval"], [
            [f"{fmt(b['lower'])}–{fmt(b['upper'])}", str(b["count"]), fmt(b["mean_predicted"]),
             fmt(b["observed_rate"]), fmt(b["observed_rate_ci"])] for b in diagram["bins"]]),
    ])


def _breakdown(doc: dict[str, Any]) -> Section:
    section = Section("breakdown", "Versions and segments", [Table(
        ["version", *TABLE_COLUMNS], [[v["version"], *(fmt(v.get(k)) for k in TABLE_COLUMNS)]
                                      for v in doc["versions"]])])
    if doc["segments"]:
        section.blocks.append(Table(
            ["segment", *TABLE_COLUMNS],
            [[f"{s['key']}:{s['value']}", *(fmt(s.get(k)) for k in TABLE_COLUMNS)]
                                          for s in doc["segments"]]))
    else:
        section.blocks.append("No segment keys were declared at as_of.")
    return section


def _alarms(doc: dict[str, Any]) -> Section:
    alarms = doc["alarms"]
    rows = [[str(a["id"]), a["rule"], a.get("version") or "all versions", a["opened_at"], a["state_at_as_of"],
             a["resolved_at"] or "—", (a.get("resolution") or {}).get("reason", "—")]
            for a in alarms["alarms"]]
    return Section("alarms", "Alarms and their resolution", [
        (f"{alarms['count']} alarms open at some time in the span; at as_of {alarms['open_at_as_of']} "
         f"were open and {alarms['resolved_by_as_of']} resolved."),
        *([Table(["id", "rule", "version", "opened", "state at as_of", "resolved", "how"], rows)]
          if rows else []),
    ])


def _completeness(doc: dict[str, Any]) -> Section:
    overall = doc["overall"]
    return Section("completeness", "Data completeness", [
        (f"{fmt(overall['n_predictions'])} predictions, {fmt(overall['n_labeled'])} with a label, "
         f"{fmt(overall['n_immature'])} still inside horizon + lag at as_of; label coverage "
         f"{fmt(overall.get('label_coverage'))}."),
        Table(["week from", *COMPLETENESS_COLUMNS],
              [[str(p["start"])[:10], *(fmt(p.get(k)) for k in COMPLETENESS_COLUMNS)]
               for p in doc["periods"]]),
    ])


def _deliveries(doc: dict[str, Any]) -> Section:
    d = doc["deliveries"]
    return Section("deliveries", "Webhook deliveries", [
        f"{d['total']} deliveries of the span's events.",
        *([Table(["event", "delivered", "failed", "pending at as_of"],
                 [[r["event"], str(r["delivered"]), str(r["failed"]), str(r["pending"])]
                  for r in d["by_event"]])] if d["by_event"] else []),
    ])


def _in_force(doc: dict[str, Any]) -> Section:
    settings = doc["settings_in_force"]
    rules = doc["rules_in_force"]
    content = settings["content"]
    return Section("settings", "Settings and rules in force at as_of", [
        (f"Settings recorded {settings['recorded_at'] or 'never changed since history began'}"
         f"{' by ' + settings['actor'] if settings['actor'] else ''}."),
        Table(["setting", "value"], [[k, fmt(v) if not isinstance(v, dict | list) else str(v)]
                                     for k, v in sorted(content.items())]),
        Table(["rule", "kind", "enabled"],
              [[r["name"], r["kind"], fmt(r["enabled"])] for r in rules["content"]]),
        *([doc["reference_note"]] if doc.get("reference_note") else []),
    ])


def _changes(doc: dict[str, Any]) -> Section:
    c = doc["changes_since_previous"]
    if c["previous"] is None:
        return Section("changes", "Changes since the previous report",
                       [("No earlier report of this model, generated by as_of, "
                        "covers a period before this one.")])
    prev = c["previous"]
    return Section("changes", "Changes since the previous report", [
        (f"Previous report: {prev['start']} to {prev['end']} as of {prev['as_of']} "
         f"(hash {prev['content_hash']}). Plan version then {fmt(c['plan_version_before'])}, now "
         f"{fmt(c['plan_version_now'])}; {len(c['settings_changes'])} settings or rules changes recorded "
         "in between."),
        Table(["figure", "previous", "this"], [[f["metric"], fmt(f["previous"]), fmt(f["this"])]
                                              for f in c["figures"]]),
    ])


def _restatements(doc: dict[str, Any]) -> Section:
    r = doc["restatements"]
    arrived = r["arrived_after_as_of"]
    blocks: list[str | Table | Drawing] = [
        (f"Checked at {r['checked_at']}: after as_of, {arrived['predictions']} predictions, "
         f"{arrived['first_labels']} first labels and {arrived['corrections']} label corrections arrived "
         "for this span. The figures above stay as known at as_of; these are the ones that data changes.")]
    if r["changed"]:
        blocks.append(Table(["where", "metric", "as of as_of", "with later data"], [
            ["whole span" if x["scope"] == "whole_span" else f"week from {str(x['start'])[:10]}", x["metric"],
             fmt(x["as_of_value"]), fmt(x["current_value"])] for x in r["changed"]]))
    return Section("restatements", "Restatements", blocks)

"""Check that the promtool unit tests cover every rule in ogive-rules.yml both ways.

Every alert must be expected to fire at some evaluation (a non-empty exp_alerts) and to stay
quiet at another (an empty exp_alerts), and every recording rule must be evaluated by at least
one promql_expr_test. promtool itself only runs the tests it is given, so a rule added without
tests would otherwise pass unnoticed. Exit status 1 names each gap.

Usage: python3 rule_coverage.py RULES_FILE TEST_FILE...
"""

import sys

import yaml


def main(rules_path, test_paths):
    with open(rules_path) as f:
        rules = yaml.safe_load(f)
    alerts = set()
    records = set()
    for group in rules["groups"]:
        for rule in group["rules"]:
            if "alert" in rule:
                alerts.add(rule["alert"])
            else:
                records.add(rule["record"])

    fires, quiet, evaluated = set(), set(), set()
    for path in test_paths:
        with open(path) as f:
            suite = yaml.safe_load(f)
        for test in suite.get("tests", []):
            for case in test.get("alert_rule_test", []):
                (fires if case.get("exp_alerts") else quiet).add(case["alertname"])
            for case in test.get("promql_expr_test", []):
                evaluated.update(r for r in records if r in case["expr"])

    gaps = []
    for name in sorted(alerts):
        if name not in fires:
            gaps.append(f"alert {name}: no test expects it to fire")
        if name not in quiet:
            gaps.append(f"alert {name}: no test expects it to stay quiet")
    for name in sorted(records - evaluated):
        gaps.append(f"recording rule {name}: no promql_expr_test evaluates it")
    unknown = (fires | quiet) - alerts
    for name in sorted(unknown):
        gaps.append(f"tests name alert {name}, which the rules file does not define")

    for gap in gaps:
        print(gap)
    print(f"{len(alerts)} alerts and {len(records)} recording rules; {len(gaps)} coverage gaps")
    return 1 if gaps else 0


if __name__ == "__main__":
    if len(sys.argv) < 3:
        sys.exit(__doc__)
    sys.exit(main(sys.argv[1], sys.argv[2:]))

"""Hand-built audit reports of an invented scenario, for the HTML report and history tests."""

from __future__ import annotations

from datetime import date, timedelta

from armlock.audit.model import ArmInfo, AuditReport, Check, Figure, Table, worst

HOSTILE = ['<script>alert(1)</script>', '"><img src=x onerror=alert(2)>', "</svg>", "&amp;",
           "it's \"quoted\"", "$x^2$ and {braces}"]


def build_report(*, as_of: str = "2026-03-23", leak_share: float = 0.002, srm_p: float = 0.4,
                 hostile: bool = False, days: int = 28, fingerprint: str = "fp-test-0001") -> AuditReport:
    """A plausible report: 10/90 split, daily SRM path, weekly leakage, SMDs and churn by browser."""
    start = date.fromisoformat(as_of) - timedelta(days=days - 1)
    daily = []
    for i in range(days):
        n = 2_000 * (i + 1)
        h = int(n * 0.1) + (i * 7 if srm_p < 0.01 else (-1) ** i * 5)
        daily.append({"date": (start + timedelta(days=i)).isoformat(), "counts": {"holdout": h, "exposed": n - h},
                      "p_fixed": max(min(1.0, 0.9 - i * 0.02), 1e-9) if srm_p >= 0.01 else 10 ** (-i / 3),
                      "p_anytime": 1.0 if srm_p >= 0.01 else min(1.0, 10 ** (-i / 5) * 5)})
    weekly = [{"week": (start + timedelta(days=7 * w)).isoformat(), "holdout_units": 12 * (w + 1),
               "holdout_share": leak_share * (w + 1) / 4, "impressions": 40 * (w + 1), "clicks": w}
              for w in range(days // 7)]
    browsers = ["Aurora", "Kestrel", "Tallow", "Other"]
    covs = [("device", "mobile"), ("device", "desktop"), ("country", "NL"), ("pre_visits", None)]
    if hostile:
        browsers = HOSTILE[:4] + [HOSTILE[5]]
        covs = [("channel", HOSTILE[0]), (HOSTILE[1], None), ("segment", HOSTILE[2]), ("x", HOSTILE[3])]
    smd = [{"covariate": c, "level": lv, "smd": s} for (c, lv), s in zip(covs, [0.02, -0.03, 0.14, -0.05])]
    churn = [{"browser": b, "customers": 500, "multi_arm": m, "share": m / 500, "expected_share": 0.01}
             for b, m in zip(browsers, [4, 60, 6, 5, 3])]
    srm_status = "fail" if srm_p < 0.0005 else "pass"
    leak_status = "fail" if leak_share > 0.01 else "pass"
    name = HOSTILE[0] if hostile else "homeware-retargeting"
    checks = [
        Check(id="srm", title="Sample ratio", status=srm_status,
              summary="Arm counts match the intended 10/90 split." if srm_status == "pass"
              else "Arm counts are off the intended split; find the cause before reading results.",
              figures={"p": Figure(label="SRM p-value", value=srm_p, unit="p"),
                       "units": Figure(label="units", value=daily[-1]["counts"]["holdout"] + daily[-1]["counts"]["exposed"], unit="count")},
              tables=[Table(title="Units by arm", columns=["arm", "units", "expected"],
                            rows=[["holdout", daily[-1]["counts"]["holdout"], 5600.0],
                                  ["exposed", daily[-1]["counts"]["exposed"], 50400.0]])],
              series={"daily": daily}),
        Check(id="leakage", title="Holdout leakage", status=leak_status,
              summary="The vendor reached holdout units." if leak_status == "fail" else "Holdout leakage is small.",
              figures={"share": Figure(label="holdout leakage", value=leak_share, unit="share")},
              tables=[Table(title="Reached holdout units by campaign", columns=["campaign", "units"],
                            rows=[[HOSTILE[1] if hostile else "spring-prospects", 12]])],
              series={"weekly": weekly}),
        Check(id="balance", title="Covariate balance", status="warn",
              summary="One covariate is above the 0.1 SMD line.",
              figures={"max_smd": Figure(label="largest |SMD|", value=0.14, unit="number")},
              series={"smd": smd}),
        Check(id="churn", title="Identity churn", status="warn",
              summary="One browser family moves customers between arms more than expected.",
              figures={"share": Figure(label="customers in several arms", value=0.0375, unit="share")},
              series={"by_browser": churn}),
        Check(id="srm_segments", title="Sample ratio by segment", status="skipped",
              summary="Not run.", reason="no segment columns mapped"),
    ]
    verdict = worst([c.status for c in checks])
    return AuditReport(experiment=name, fingerprint=fingerprint, as_of=as_of,
                       generated_at="2026-03-24T06:00:00Z", armlock_version="0.1.0",
                       arms=[ArmInfo(name="holdout", weight=1000, role="holdout"),
                             ArmInfo(name="exposed", weight=9000, role="exposed")],
                       verdict=verdict, verdict_text=f"{verdict}: see the checks below.",
                       input_notes=[HOSTILE[4]] if hostile else [], checks=checks)


def weekly(n: int = 4) -> list[AuditReport]:
    """Weekly runs from 2026-03-02; leakage grows 0.2% -> 0.2% -> 0.6% -> 1.4%, SRM breaks last."""
    plan = [(0.002, 0.6), (0.002, 0.5), (0.006, 0.3), (0.014, 0.0001)]
    return [build_report(as_of=(date(2026, 3, 2) + timedelta(days=7 * i)).isoformat(),
                         leak_share=plan[i][0], srm_p=plan[i][1], days=7 * (i + 1)) for i in range(n)]

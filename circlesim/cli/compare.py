"""``circlesim compare A.toml B.toml ...``: several plans for one patient, side by side.

Prints one row per plan with the headline outcomes and writes a self-contained HTML report
(curves of every plan on shared axes, the full outcome table, warnings, cautions and the
inputs as TOML). Optionally writes the full outcome table as CSV.
"""

from __future__ import annotations

import argparse
import shlex
import sys
from pathlib import Path

from circlesim.base.files import write_text_atomic
from circlesim.base.validation import InputError
from circlesim.cli.common import add_report_options, caution_banner, output_path
from circlesim.domain.costs import Prices
from circlesim.outcomes.comparison import Comparison, compare_files, find_scenario_files
from circlesim.outcomes.emissions import DEFAULT_GWP_HORIZON

#: Columns printed on the terminal: (key of CaseSummary.row, short header, format).
TERMINAL_COLUMNS = (
    ("time to target, min", "to target", "{:.1f}"),
    ("within ±10 % of target, min", "in ±10%", "{:.0f}"),
    ("overshoot, % of target", "overshoot%", "{:.0f}"),
    ("MAC-hours (agent + N2O)", "MAC-h", "{:.2f}"),
    ("agent delivered, mL", "agent mL", "{:.1f}"),
    ("N2O used, L", "N2O L", "{:.0f}"),
    ("CO2-eq total (GWP{h}), kg", "CO2e kg", "{:.1f}"),
    ("cost total{cur}", "cost", "{:.2f}"),
    ("absorbent used, g", "absorb g", "{:.0f}"),
    ("lowest FIO2", "min FIO2", "{:.3f}"),
    ("min below FIO2 {thr:g}", "min<thr", "{:.1f}"),
    ("warnings", "warn", "{:d}"),
)


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "compare", help="run several plans for one patient and compare their outcomes",
        description="Run several scenario files for the same patient and breathing system, "
                    "print one row of outcomes per plan and write an HTML report with the "
                    "curves of all plans on shared axes. Arguments may be files, folders "
                    "(every *.toml inside) or quoted glob patterns.")
    p.add_argument("scenarios", nargs="+", help="scenario TOML files, folders or patterns")
    add_report_options(p, "out/compare.html",
                       "also write the full outcome table as CSV to this path")
    p.add_argument("--gwp-horizon", default=str(DEFAULT_GWP_HORIZON),
                   help=f"GWP time horizon in years, 20 or 100 (default "
                        f"{DEFAULT_GWP_HORIZON})")
    p.add_argument("--price-per-bottle", type=float, default=None,
                   help="price of one bottle of liquid agent (replaces the scenarios' "
                        "[prices]; needs --bottle-ml)")
    p.add_argument("--bottle-ml", type=float, default=None, help="mL of liquid per bottle")
    p.add_argument("--n2o-price-per-1000l", type=float, default=None,
                   help="price of 1000 L of N2O")
    p.add_argument("--absorbent-price-per-kg", type=float, default=None,
                   help="price of 1 kg of absorbent")
    p.add_argument("--currency", default="", help="currency label for the prices")
    p.add_argument("--interval", type=float, default=0.1, help="output interval, min")
    p.set_defaults(handler=run)


def _prices(args: argparse.Namespace) -> Prices | None:
    values = (args.price_per_bottle, args.bottle_ml, args.n2o_price_per_1000l,
              args.absorbent_price_per_kg)
    if all(v is None for v in values):
        return None
    return Prices(agent_price_per_bottle=args.price_per_bottle, bottle_ml=args.bottle_ml,
                  n2o_price_per_1000_l=args.n2o_price_per_1000l,
                  absorbent_price_per_kg=args.absorbent_price_per_kg,
                  currency=args.currency, note="given on the command line")


def _progress(total: int):
    from tqdm import tqdm

    return lambda items: tqdm(items, total=total, desc="simulating", unit="plan",
                              disable=None, file=sys.stderr, leave=False)


def _command(paths: list[Path], args: argparse.Namespace) -> str:
    """The command line that reproduces the comparison from the saved files."""
    words = ["circlesim", "compare", *map(str, paths),
             "--gwp-horizon", str(args.gwp_horizon)]
    for flag in ("price_per_bottle", "bottle_ml", "n2o_price_per_1000l",
                 "absorbent_price_per_kg"):
        value = getattr(args, flag)
        if value is not None:
            words += ["--" + flag.replace("_", "-"), f"{value:g}"]
    if args.currency:
        words += ["--currency", args.currency]
    return " ".join(shlex.quote(w) for w in words)


def format_table(comparison: Comparison) -> str:
    """The terminal table: one row per plan, the headline outcome columns."""
    h = comparison.gwp_horizon_years
    cur = f" ({comparison.currency})" if comparison.currency else ""
    thr = comparison.report.fio2_threshold
    header = ["plan"] + [short for _, short, _ in TERMINAL_COLUMNS]
    body = []
    for row in comparison.rows():
        cells = [str(row["plan"])]
        for key, _, fmt in TERMINAL_COLUMNS:
            value = row.get(key.format(h=h, cur=cur, thr=thr))
            cells.append("—" if value is None else fmt.format(value))
        body.append(cells)
    widths = [max(len(r[i]) for r in [header, *body]) for i in range(len(header))]
    lines = ["  ".join(c.ljust(w) if i == 0 else c.rjust(w)
                       for i, (c, w) in enumerate(zip(r, widths, strict=True)))
             for r in [header, *body]]
    lines.insert(1, "-" * len(lines[0]))
    legend = (f"to target / in ±10%: min to reach, and min within ±10 % of, "
              f"{comparison.report.target_end_tidal_mac:g} × age-adjusted MAC end-tidal (agent and "
              f"N2O MAC fractions added); "
              f"MAC-h: end-tidal MAC-hours with N2O added; CO2e: GWP{h}, all agent and N2O "
              f"delivered; cost{cur}: at the prices given (— without prices); absorb g: "
              f"absorbent used; min<thr: min with FIO2 below {thr:g}; warn: alerts raised.")
    return "\n".join(lines) + "\n\n" + legend


def format_warnings(comparison: Comparison) -> str:
    """The alerts of every plan, one line per kind (the first stretch and how many)."""
    lines = ["Warnings:"]
    for plan in comparison.plans:
        first: dict[str, object] = {}
        count: dict[str, int] = {}
        for alert in plan.result.alerts:
            first.setdefault(alert.key, alert)
            count[alert.key] = count.get(alert.key, 0) + 1
        if not first:
            lines.append(f" {plan.label}: none raised by the alert rules.")
        for key, alert in first.items():
            more = f" (and {count[key] - 1} more stretches)" if count[key] > 1 else ""
            lines.append(f" {plan.label}: {alert}{more}")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    prices = _prices(args)
    if not args.no_report:
        try:
            import plotly  # noqa: F401
        except ImportError:
            raise InputError("the HTML report needs plotly: install the app extra "
                             "(pip install 'circlesim[app]') or pass --no-report.") from None
    paths = find_scenario_files(args.scenarios)
    comparison = compare_files(paths, gwp_horizon=args.gwp_horizon, prices=prices,
                               output_interval_min=args.interval,
                               progress=_progress(len(paths)))
    print(format_table(comparison))
    for note in comparison.notes:
        print(f"Note: {note}")
    print(format_warnings(comparison))
    if args.csv is not None:
        path = output_path(args.csv, args.csv, args.overwrite)
        text = comparison.table().to_csv(index=False, float_format="%.6g")
        written = write_text_atomic(path, text, overwrite=args.overwrite)
        print(f"\nOutcome table written to {written}")
    if not args.no_report:
        from circlesim.reports.comparison import write_comparison_report

        path = output_path(args.report, Path("out") / "compare.html", args.overwrite)
        command = _command(paths, args)
        written = write_comparison_report(comparison, path, command=command,
                                          overwrite=args.overwrite)
        print(f"\nReport written to {written}")
    print()
    print(caution_banner())
    return 0

#!/usr/bin/env python3
"""Turn a criterion run of orrery's benches into the markdown tables of
benches/README.md and an SVG bar chart of each machine's ratio to plain Rust.

Reads the median point estimates from target/criterion/**/new/estimates.json,
the contraction counts the benches record in target/criterion/contractions.tsv
and the space harness's lines in target/criterion/space.tsv. Standard library
only.

    python3 benches/report.py [--criterion DIR] [--svg FILE]
"""

import argparse
import itertools
import json
import math
import os
import re
import sys


def machine_table():
    """The machines' names, in the order of the machine table in
    machines/mod.rs (fastest first): every list of machines comes from it."""
    here = os.path.dirname(os.path.abspath(__file__))
    with open(os.path.join(here, "..", "machines", "mod.rs")) as f:
        source = f.read()
    table = source.split("machine_table! {", 2)[-1].split("}", 1)[0]
    return re.findall(r'^\s*"([a-z_]+)" =>', table, re.M)


MACHINE_ORDER = machine_table()

# The fast machines: every machine of the table but the reference stepper.
FAST_MACHINES = [m for m in MACHINE_ORDER if m != "stepper"]

# The chart's colours: env, cek and the stepper keep the colours of earlier
# charts, and every other machine of the table takes the next of the palette
# in table order (round again if the table outgrows it).
FIXED_COLOURS = {"env": "#3b7dd8", "cek": "#e08a1e", "stepper": "#6a9f3a"}
PALETTE = ("#b8408c", "#7a5cc7", "#2a9d8f")
COLOURS = {**FIXED_COLOURS,
           **dict(zip((m for m in MACHINE_ORDER if m not in FIXED_COLOURS), itertools.cycle(PALETTE)))}

# The shapes of the `request N rules{shape}` groups of benches/machines.rs.
REQUEST_SHAPES = ("", " (branches)", " (table)")


def load_estimates(root):
    """{(group, function, value): {"median": ns, "throughput": dict or None}}"""
    found = {}
    for directory, _subdirs, files in os.walk(root):
        if os.path.basename(directory) != "new" or "benchmark.json" not in files:
            continue
        with open(os.path.join(directory, "benchmark.json")) as f:
            bench = json.load(f)
        with open(os.path.join(directory, "estimates.json")) as f:
            estimates = json.load(f)
        key = (bench["group_id"], bench["function_id"], bench["value_str"])
        found[key] = {
            "median": estimates["median"]["point_estimate"],
            "throughput": bench.get("throughput"),
        }
    return found


def load_tsv(path):
    """Rows of a tab-separated file; a missing file has none."""
    if not os.path.exists(path):
        return []
    with open(path) as f:
        return [line.rstrip("\n").split("\t") for line in f if line.strip()]


def load_contractions(root):
    """{full id: contractions}; the last line for an id wins."""
    return {row[0]: int(row[1]) for row in load_tsv(os.path.join(root, "contractions.tsv"))}


def full_id(group, function, value):
    parts = [group, function] + ([value] if value is not None else [])
    return "/".join(parts)


def human_time(ns):
    for unit, scale in (("s", 1e9), ("ms", 1e6), ("µs", 1e3)):
        if ns >= scale:
            return f"{ns / scale:.3g} {unit}"
    return f"{ns:.3g} ns"


def ratio(x):
    return f"{x:.3g}×" if x is not None else "–"


def slope(points):
    """Least-squares slope of log(y) against log(x)."""
    xs = [math.log(x) for x, _ in points]
    ys = [math.log(y) for _, y in points]
    mx, my = sum(xs) / len(xs), sum(ys) / len(ys)
    sxx = sum((x - mx) ** 2 for x in xs)
    if sxx == 0:
        return None
    return sum((x - mx) * (y - my) for x, y in zip(xs, ys)) / sxx


def machines_in(names):
    known = [m for m in MACHINE_ORDER if m in names]
    return known + sorted(n for n in names if n not in MACHINE_ORDER and n != "rust")


def workload_table(estimates, contractions):
    """Per workload: medians, ratios to rust, the fastest machine, each fast
    machine ÷ env, stepper÷cek per contraction. Returns the markdown lines
    and the ratios for the chart."""
    groups = {}
    for (group, function, value), est in estimates.items():
        if value is None:
            groups.setdefault(group, {})[function] = est
    machines = machines_in({f for g in groups.values() if "rust" in g for f in g})
    # env is the baseline the other fast machines are measured against.
    against_env = [m for m in machines if m in FAST_MACHINES and m != "env"] if "env" in machines else []
    step_cek_column = "stepper" in machines and "cek" in machines
    header = ["workload", "rust"] + machines
    header += [f"{m} ÷ rust" for m in machines]
    header += ["fastest machine"] + [f"{m} ÷ env" for m in against_env]
    header += ["stepper ÷ cek per contraction"] if step_cek_column else []
    header += ["contractions"]
    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    chart = []
    throughput_lines = []
    for group in sorted(groups, key=workload_order):
        row = groups[group]
        if group.startswith("accounting "):
            continue
        if "rust" not in row:
            for function, est in sorted(row.items()):
                throughput_lines.append(throughput_line(group, function, est))
            continue
        rust = row["rust"]["median"]
        cells = [group, human_time(rust)]
        cells += [human_time(row[m]["median"]) if m in row else "–" for m in machines]
        ratios = {m: row[m]["median"] / rust if m in row else None for m in machines}
        cells += [ratio(ratios[m]) for m in machines]
        chart.append((group, ratios))
        # Lowest median; a tie goes to the machine first in the table.
        ran = [m for m in machines if m in row]
        cells.append(min(ran, key=lambda m: row[m]["median"]) if ran else "–")
        cells += [ratio(row[m]["median"] / row["env"]["median"] if m in row and "env" in row else None)
                  for m in against_env]
        if step_cek_column:
            cells.append(ratio(per_contraction_ratio(estimates, contractions, group, "stepper", "cek")))
        counts = {contractions.get(full_id(group, m, None)) for m in machines if m in row}
        counts.discard(None)
        cells.append(", ".join(str(c) for c in sorted(counts)) or "–")
        lines.append("| " + " | ".join(cells) + " |")
        for m in machines:
            est = row.get(m)
            if est and est["throughput"]:
                throughput_lines.append(throughput_line(group, m, est))
        if rust and row["rust"]["throughput"]:
            throughput_lines.append(throughput_line(group, "rust", row["rust"]))
    return lines, throughput_lines, chart


def workload_order(group):
    """Keep related sizes together: fib 25 before fib 30, tak before tak."""
    words = group.split()
    return [(0, int(w)) if w.isdigit() else (1, w) for w in words]


def throughput_line(group, function, est):
    t = est["throughput"] or {}
    median = est["median"]
    if "Bytes" in t:
        mb_per_s = t["Bytes"] / (median / 1e9) / 1e6
        return f"- `{group}/{function}`: {t['Bytes']} bytes in {human_time(median)}: **{mb_per_s:.1f} MB/s**"
    if "Elements" in t:
        per = median / t["Elements"]
        return f"- `{group}/{function}`: {human_time(per)} per run ({t['Elements']} runs in {human_time(median)})"
    return f"- `{group}/{function}`: {human_time(median)}"


def scaling_tables(estimates, contractions):
    """Slopes of time against contractions (groups named `scaling …`) and
    the de Bruijn depth table (group `depth`)."""
    series = {}
    for (group, function, value), est in estimates.items():
        if value is None:
            continue
        n = contractions.get(full_id(group, function, value))
        if n:
            series.setdefault((group, function), []).append((value, n, est["median"]))
    lines = ["| series | sizes | contractions | ns per contraction (smallest → largest) | log-log slope |",
             "|---|---|---|---|---|"]
    depth_lines = []
    for (group, function), points in sorted(series.items()):
        points.sort(key=lambda p: p[1])
        if group == "depth":
            depth_lines.append(depth_line(function, points))
            continue
        s = slope([(n, t) for _, n, t in points])
        sizes = f"{points[0][0]} … {points[-1][0]}"
        counts = f"{points[0][1]} … {points[-1][1]}"
        per = f"{points[0][2] / points[0][1]:.3g} → {points[-1][2] / points[-1][1]:.3g}"
        lines.append(f"| {group}/{function} | {sizes} | {counts} | {per} | {s:.3f} |")
    if depth_lines:
        header = ["| machine | " + " | ".join(f"depth {v}" for v, _, _ in sorted(
            next(iter(p for (g, _), p in series.items() if g == "depth")), key=lambda p: int(p[0])))
            + " | deepest ÷ depth 0 |"]
        depth_lines = header + ["|" + "---|" * (header[0].count("|") - 1)] + depth_lines
    return lines, depth_lines


def depth_line(function, points):
    points = sorted(points, key=lambda p: int(p[0]))
    per = [t / n for _, n, t in points]
    cells = [f"{p:.3g} ns" for p in per]
    return f"| {function} | " + " | ".join(cells) + f" | {per[-1] / per[0]:.3f}× |"


def space_table(root):
    rows = {}
    for row in load_tsv(os.path.join(root, "space.tsv")):
        if len(row) == 7:
            rows[row[0]] = row
    if not rows:
        return []
    lines = ["| machine | baseline RSS | peak RSS (VmHWM) | contractions | outcome | machine's own peak | seconds |",
             "|---|---|---|---|---|---|---|"]
    for m in machines_in(set(rows)):
        name, base, peak, n, outcome, own, secs = rows[m]
        own = f"{int(own)} bytes" if own.isdigit() else "not exposed"
        lines.append(f"| {name} | {int(base) / 2**20:.1f} MiB | {int(peak) / 2**20:.1f} MiB | {n} | {outcome} | {own} | {secs} |")
    return lines


def accounted_machines(estimates, group):
    """The machines of an `accounting …` group with an `m unaccounted`
    entry (a `without_accounting` build), in table order."""
    suffix = " unaccounted"
    return machines_in({f[:-len(suffix)] for (g, f, v) in estimates
                        if g == group and v is None and f.endswith(suffix)})


def accounting_table(estimates):
    """Each machine beside its `without_accounting` build: the share of the
    run the accounting takes."""
    groups = sorted({g for (g, _f, v) in estimates if g.startswith("accounting ") and v is None},
                    key=workload_order)
    if not groups:
        return []
    lines = ["| workload | machine | accounted | unaccounted | accounting's share |", "|---|---|---|---|---|"]
    for group in groups:
        for m in accounted_machines(estimates, group):
            x, y = median(estimates, group, m), median(estimates, group, f"{m} unaccounted")
            if x and y:
                lines.append(f"| {group[len('accounting '):]} | {m} | {human_time(x)} | {human_time(y)} "
                             f"| {(x - y) / x * 100:.1f}% |")
    return lines


def median(estimates, group, function, value=None):
    est = estimates.get((group, function, value))
    return est["median"] if est else None


def targets(estimates, contractions, root):
    """The performance targets, each with the measured figure
    and whether it is met."""
    lines = ["| target | measured | met |", "|---|---|---|"]

    def add(name, value, ok, fmt="{:.3g}"):
        if value is None:
            missing.append(name)
            return
        met = "yes" if ok(value) else "**no**"
        lines.append(f"| {name} | {fmt.format(value)} | {met} |")

    missing = []

    def over(group, a, b):
        x, y = median(estimates, group, a), median(estimates, group, b)
        return x / y if x and y else None

    for group in ("fib 25", "fib 30", "tak 18 12 6", "tak 24 16 8"):
        for m in FAST_MACHINES:
            add(f"{group}: {m} within 40× of plain Rust (aim 20×)", over(group, m, "rust"),
                lambda r: r <= 40, "{:.3g}×")
    for group in ("fib 25", "fib 30", "tak 18 12 6", "tak 24 16 8"):
        add(f"{group}: cek within 1.5× of env", over(group, "cek", "env"), lambda r: r <= 1.5, "{:.3g}×")
    # Issue 14's targets for the register bytecode machine.
    for group in ("fib 30", "tak 24 16 8"):
        add(f"{group}: vm within 20× of plain Rust", over(group, "vm", "rust"), lambda r: r <= 20, "{:.3g}×")
    for group in ("fib 30", "tak 24 16 8", "queens 8"):
        add(f"{group}: vm at least 3× faster than env", over(group, "env", "vm"), lambda r: r >= 3, "{:.3g}×")
    for group in ("tak 18 12 6", "fib 25"):
        add(f"{group}: stepper within 50× of cek per contraction",
            per_contraction_ratio(estimates, contractions, group, "stepper", "cek"),
            lambda r: r <= 50, "{:.3g}×")
    series = {}
    for (group, function, value), est in estimates.items():
        n = contractions.get(full_id(group, function, value)) if value is not None else None
        if n:
            series.setdefault((group, function), []).append((int(value), n, est["median"]))
    for (group, function), points in sorted(series.items()):
        if group == "depth":
            points.sort()
            deepest = points[-1]
            add(f"depth {deepest[0]} within 1.2× of depth 0 per contraction ({function})",
                (deepest[2] / deepest[1]) / (points[0][2] / points[0][1]), lambda r: r <= 1.2, "{:.3g}×")
        elif function == "stepper":
            add(f"{group}: log-log slope at most 1.1", slope([(n, t) for _, n, t in points]),
                lambda s: s <= 1.1, "{:.3f}")
        else:
            add(f"{group}/{function}: log-log slope within 0.95–1.05", slope([(n, t) for _, n, t in points]),
                lambda s: 0.95 <= s <= 1.05, "{:.3f}")
    for (group, function, value), est in sorted(estimates.items(), key=lambda kv: kv[0][:2]):
        runs = (est["throughput"] or {}).get("Elements")
        if runs and function != "rust":
            add(f"{group}: {function} under 1 µs per run", est["median"] / runs / 1e3,
                lambda us: us < 1, "{:.3g} µs")
    watering = estimates.get(("watering plan x10^4", "vm", None))
    vm_runs = ((watering or {}).get("throughput") or {}).get("Elements")
    add("watering plan x10^4: vm at most 200 ns per run", watering["median"] / vm_runs if vm_runs else None,
        lambda ns: ns <= 200, "{:.3g} ns")
    # Per request, the size of the rule set must not matter: the shapes the
    # bench defines, and any other `request N rules{shape}` group of the run.
    hits = (re.fullmatch(r"request \d+ rules(.*)", g) for (g, _f, _v) in estimates)
    found = {hit.group(1) for hit in hits if hit}
    for shape in list(REQUEST_SHAPES) + sorted(found - set(REQUEST_SHAPES)):
        for m in FAST_MACHINES:
            big = median(estimates, f"request 1000 rules{shape}", m)
            small = median(estimates, f"request 10 rules{shape}", m)
            add(f"request 1000 rules{shape} ÷ request 10 rules{shape} on {m} at most 1.5×",
                big / small if big and small else None, lambda r: r <= 1.5, "{:.3g}×")
    for row in load_tsv(os.path.join(root, "space.tsv")):
        if len(row) == 7:
            add(f"10^7-iteration tail loop on {row[0]}: peak RSS under 32 MiB",
                int(row[2]) / 2**20, lambda mib: mib < 32, "{:.1f} MiB")
    for group in sorted({g for (g, f, _v) in estimates if g.startswith("accounting ")}):
        for m in accounted_machines(estimates, group):
            x, y = median(estimates, group, m), median(estimates, group, f"{m} unaccounted")
            add(f"{group}: {m}'s fuel and memory accounting under 5% of the run",
                (x - y) / x * 100 if x and y else None, lambda pct: pct < 5, "{:.1f}%")
    if missing:
        lines.append("\nNot measured in this run: " + "; ".join(missing) + ".")
    return lines


def per_contraction_ratio(estimates, contractions, group, a, b):
    ta, tb = median(estimates, group, a), median(estimates, group, b)
    na, nb = contractions.get(f"{group}/{a}"), contractions.get(f"{group}/{b}")
    if not (ta and tb and na and nb):
        return None
    return (ta / na) / (tb / nb)


def svg_chart(chart, path):
    """Horizontal bars, one per workload and machine, on a log scale of the
    ratio to plain Rust."""
    machines = machines_in({m for _, r in chart for m in r if r[m] is not None})
    values = [r[m] for _, r in chart for m in machines if r.get(m)]
    if not values:
        return
    top = 10 ** math.ceil(math.log10(max(values)))
    bottom = min(1.0, 10 ** math.floor(math.log10(min(values))))
    left, width, bar, gap = 150, 560, 12, 10
    height_per = bar * len(machines) + gap
    height = 60 + height_per * len(chart) + 40

    def x(v):
        return left + width * (math.log10(v) - math.log10(bottom)) / (math.log10(top) - math.log10(bottom))

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{left + width + 40}" height="{height}" '
           f'font-family="sans-serif" font-size="11">',
           f'<text x="{left}" y="20" font-size="13">Time ÷ plain Rust (log scale, median of one run)</text>']
    decade = bottom
    while decade <= top * 1.0001:
        out.append(f'<line x1="{x(decade):.1f}" y1="40" x2="{x(decade):.1f}" y2="{height - 35}" stroke="#ccc"/>')
        out.append(f'<text x="{x(decade):.1f}" y="{height - 22}" text-anchor="middle">{decade:g}×</text>')
        decade *= 10
    for aim, label in ((20, "aim 20×"), (40, "target 40×")):
        if bottom < aim < top:
            out.append(f'<line x1="{x(aim):.1f}" y1="32" x2="{x(aim):.1f}" y2="{height - 35}" '
                       f'stroke="#c33" stroke-dasharray="4 3"/>')
            out.append(f'<text x="{x(aim) + 2:.1f}" y="38" fill="#c33" font-size="9">{label}</text>')
    y = 45
    for group, ratios in chart:
        out.append(f'<text x="{left - 6}" y="{y + height_per / 2 - gap / 2 + 4:.1f}" text-anchor="end">{escape(group)}</text>')
        for m in machines:
            v = ratios.get(m)
            if v:
                out.append(f'<rect x="{left}" y="{y}" width="{x(v) - left:.1f}" height="{bar - 2}" '
                           f'fill="{COLOURS.get(m, "#888")}"><title>{m}: {v:.3g}×</title></rect>')
                out.append(f'<text x="{x(v) + 3:.1f}" y="{y + bar - 3}" font-size="9">{v:.3g}</text>')
            y += bar
        y += gap
    lx = left
    for m in machines:
        out.append(f'<rect x="{lx}" y="{height - 14}" width="10" height="10" fill="{COLOURS.get(m, "#888")}"/>')
        out.append(f'<text x="{lx + 14}" y="{height - 5}">{m}</text>')
        lx += 80
    out.append("</svg>")
    with open(path, "w") as f:
        f.write("\n".join(out) + "\n")


def escape(text):
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    default = os.environ.get("CRITERION_HOME") or os.path.join(
        os.environ.get("CARGO_TARGET_DIR") or os.path.join(here, "..", "target"), "criterion")
    parser.add_argument("--criterion", default=default,
                        help="criterion's output directory (default: $CRITERION_HOME, "
                             "else $CARGO_TARGET_DIR/criterion, else target/criterion)")
    parser.add_argument("--svg", default=os.path.join(here, "ratios.svg"),
                        help="where to write the chart (default: benches/ratios.svg)")
    args = parser.parse_args()
    if not os.path.isdir(args.criterion):
        sys.exit(f"no criterion output in {args.criterion}: run `cargo bench` first")
    estimates = load_estimates(args.criterion)
    contractions = load_contractions(args.criterion)
    table, throughput, chart = workload_table(estimates, contractions)
    if len(table) > 2:
        print("### Workloads (median per iteration)\n")
        print("\n".join(table))
    if throughput:
        print("\n### Per run and throughput\n")
        print("\n".join(throughput))
    slopes, depth = scaling_tables(estimates, contractions)
    if len(slopes) > 2:
        print("\n### Scaling: time against contractions\n")
        print("\n".join(slopes))
    if depth:
        print("\n### de Bruijn depth: time per contraction\n")
        print("\n".join(depth))
    space = space_table(args.criterion)
    if space:
        print("\n### Space: 10^7-iteration tail loop\n")
        print("\n".join(space))
    accounting = accounting_table(estimates)
    if accounting:
        print("\n### Accounting overhead\n")
        print("\n".join(accounting))
    print("\n### Targets\n")
    print("\n".join(targets(estimates, contractions, args.criterion)))
    svg_chart(chart, args.svg)
    print(f"\n(chart written to {os.path.relpath(args.svg)})", file=sys.stderr)


if __name__ == "__main__":
    main()

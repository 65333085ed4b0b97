"""``advbound inspect FILE [--set NAME=VALUE] [--json]``: what an instance or table file defines.

Shows the domain size, output counts, alphabet, positions (names, costs, dead ones
flagged), the histogram of time profiles of a composed function, the size of the
dense SDP it implies, and the memory and rough time a dense ``solve`` would take with
each solver next to the memory this machine has available (``solve`` refuses above it
without ``--allow-large``; see :mod:`advbound.functions.sizing`).  Calls
:func:`advbound.functions.sizing.inspect_summary`.
"""

from __future__ import annotations

import json
import textwrap

__all__ = ["register", "run"]

_SHOW_PROFILES = 20


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "inspect", help="show domain, positions, time profiles and SDP size of an instance or table file",
        description="Show what an instance file (.toml) or table file defines: domain size, outputs, "
                    "alphabet, positions (dead ones flagged), time profiles and the size of the dense SDP.")
    p.add_argument("file", help="instance file (.toml) or table file")
    p.add_argument("--set", dest="params", action="append", default=[], metavar="NAME=VALUE",
                   help="grid parameter value (repeatable); default: the first grid point")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.add_argument("--bound", choices=("general", "positive"), default="general",
                   help="which SDP to size (default: general, i.e. ADV±)")
    p.set_defaults(run=run)


def _load(args):
    from advbound.functions.instance import (build_instance, grid_points, load_instance, parse_params,
                                             row_length_cut, time_model_of)
    from advbound.functions.tablefile import read_table

    params = parse_params(args.params)
    if args.file.endswith(".toml"):
        spec = load_instance(args.file, check_points=not params)
        note = ""
        if spec.grid:
            points = grid_points(spec)
            if not params:
                note = f"first of {len(points)} grid points"
            elif set(spec.grid) - set(params):
                note = "unset parameters from the first grid point"
            params = {k: params.get(k, v) for k, v in points[0].items()} | params
        f = build_instance(spec, params)
        cut = row_length_cut(spec, params, inputs=f.size)
        return f, time_model_of(spec, params), {"instance": spec.name, "params": params, "params_note": note,
                                                "row_length_cut": cut}
    if params:
        from advbound.errors import InvalidInstanceError
        raise InvalidInstanceError(f"{args.file}: --set given for a table file (it has no parameters)")
    return read_table(args.file), None, {"instance": None, "params": {}, "params_note": "", "row_length_cut": None}


def _estimates(f, s: dict) -> dict:
    from advbound.functions.sizing import memory_budget, solve_estimate

    out = {"memory_available": memory_budget()}
    if s["sdp"]["form"] != "constant":
        out["solve_estimates"] = {name: {k: v for k, v in solve_estimate(f, s["sdp"]["bound"], name, s["sdp"]).items()
                                         if k in ("memory_bytes", "seconds", "memory_formula", "time_formula")}
                                  for name in ("SCS", "CLARABEL")}
    return out


def run(args) -> int:
    from advbound.functions.sizing import inspect_summary

    f, tm, meta = _load(args)
    s = inspect_summary(f, tm, bound=args.bound, max_profiles=None if args.json else _SHOW_PROFILES)
    s.update(_estimates(f, s))
    if not f.is_constant:
        from advbound.programs.choose import choose_method
        c = choose_method(f, args.bound)
        s["auto_method"] = {"method": c.method, "solver": c.solver, "reason": c.reason}
    if args.json:
        print(json.dumps({"file": args.file, **meta, **s}, sort_keys=False))
        return 0
    print(_text(args.file, meta, s, f))
    return 0


def _fmt_bytes(b: int) -> str:
    for unit, k in (("TB", 1 << 40), ("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if b >= k:
            return f"{b / k:.1f} {unit}"
    return f"{b} B"


def _text(path: str, meta: dict, s: dict, f) -> str:
    lines = []
    head = f"file: {path}"
    if meta["instance"]:
        head += f"  (instance {meta['instance']}"
        if meta["params"]:
            head += ", " + ", ".join(f"{k}={v}" for k, v in meta["params"].items())
            if meta["params_note"]:
                head += f"; {meta['params_note']}"
        head += ")"
    lines.append(head)
    if s["description"]:
        lines.append(f"description: {s['description']}")
    lines.append(f"domain: {s['domain_size']} inputs on {s['positions']} positions, alphabet {s['alphabet']!r}")
    lines.append("outputs: " + ", ".join(f"{k}: {v}" for k, v in s["outputs"].items()))
    if s["constant"]:
        lines.append("constant function: bound is 0")
    dead = set(s["dead_positions"])
    costs = s["costs"]
    uniform = len(set(costs)) == 1
    lines.append(f"positions: {s['positions']} ({s['positions'] - len(dead)} live, {len(dead)} dead), "
                 + (f"all costs {costs[0]:g}" if uniform else "costs after ':'"))

    def tag(j: int) -> str:
        nm = s["position_names"][j]
        t = nm if uniform else f"{nm}:{costs[j]:g}"
        return f"{t}(dead)" if nm in dead else t

    groups = s["groups"] or [list(range(s["positions"]))]
    for i, g in enumerate(groups, 1):
        label = f"  row {i}: " if s["groups"] else "  "
        body = " ".join(tag(j) for j in g)
        lines.extend(textwrap.wrap(body, 100, initial_indent=label, subsequent_indent=" " * len(label)))
    if s["time_profiles"] is not None:
        shown, total = len(s["time_profiles"]), s["profiles_total"]
        lines.append(f"time profiles (k_1..k_n: inputs), {s['time_model']}: {total} distinct")
        for p, c in s["time_profiles"].items():
            lines.append(f"  ({p}): {c}")
        if shown < total:
            lines.append(f"  ... {total - shown} more (use --json for all)")
        lines.append("sum t_i^2: " + ", ".join(f"{k}: {v}" for k, v in s["sum_squares"].items()))
    cut = meta.get("row_length_cut")
    if cut:
        where = "; ".join(f"row {c['row']}: positions {c['positions'][0]}..{c['positions'][1]}" for c in cut["rows"])
        lost = (f"{cut['dropped']} of the {cut['allowed']} inputs the budget allows" if cut["allowed"] is not None
                else "inputs (the uncut domain is too large to count)")
        lines.append(f"row_length cuts allowed time profiles: it leaves out {lost} ({where}); omit row_length "
                     "to keep them")
    z = s["sdp"]
    name = "ADV±" if z["bound"] == "general" else "ADV (positive weights)"
    if z["form"] == "constant":
        lines.append(f"SDP ({name}): none needed")
    else:
        sizes = ", ".join(f"{c} of size {k}" for k, c in z["lmi_sizes"].items()) or "none"
        lines.append(f"SDP ({name}, {z['form']} form): {z['variables']} variables, {z['lmi_count']} LMIs ({sizes})")
        lines.append(f"  dense memory ~ {_fmt_bytes(z['memory_bytes'])}  [{z['memory_formula']}]")
    from advbound.functions.sizing import format_seconds
    avail = s["memory_available"]["available"]
    for name, e in s.get("solve_estimates", {}).items():
        over = "  (more than available: solve needs --allow-large)" if avail is not None and \
            e["memory_bytes"] > avail else ""
        lines.append(f"  solve with {name}: ~ {_fmt_bytes(e['memory_bytes'])}, rough time "
                     f"{format_seconds(e['seconds'])}{over}")
    if avail is not None:
        lines.append(f"  memory available: {_fmt_bytes(avail)} ({s['memory_available']['source']})")
    if "auto_method" in s:
        a = s["auto_method"]
        lines.append(f"program (solve --method auto): {a['method']}"
                     + (f" with {a['solver']}" if a["solver"] else "") + f": {a['reason']}")
    return "\n".join(lines)

"""``rigbench info``: handshake with a board and show what it declares (identity,
parameters, signals, loops), its status and the link's health.

``--json`` keys: ``board``, ``params`` (by name, in declaration order), ``signals`` (in
telemetry order), ``loops`` (by name), ``status`` (latest status frame or null),
``health`` (link counters). Values are in the board's declared units. A loop's optional
fields (PROTOCOL.md §5.4: ``setpoint``, ``limit``, ``dfilt``, ``rate``, ``action``) are null
when the board does not declare them.
"""

from __future__ import annotations

from rigbench.wire.describe import LOOP_OPTIONAL

from rigbench.commands._common import add_json_option, add_port_option, open_link, plain, print_json, table


def add_parser(subparsers):
    p = subparsers.add_parser("info", help="handshake; identity, parameters, signals, loops, "
                              "link health", description=__doc__.split("\n\n")[0])
    add_port_option(p)
    add_json_option(p)
    p.add_argument("--listen", type=float, default=0.5, metavar="S",
                   help="seconds to listen for status frames before reporting (default 0.5)")
    return p


def _board(link) -> dict:
    i = link.info
    return {"board": i.board, "firmware": i.firmware, "rig": i.rig,
            "protocol": "%d.%d" % i.version, "rate_hz": i.rate_hz,
            "watchdog_ms": i.watchdog_ms, "simulated": i.simulated, "url": link.url}


def collect(link) -> dict:
    return {
        "board": _board(link),
        "params": {n: {"index": p.index, "value": p.value, "unit": p.unit, "min": p.minimum,
                       "max": p.maximum, "writable": p.writable}
                   for n, p in link.params.items()},
        "signals": [{"index": s.index, "name": s.name, "unit": s.unit} for s in link.signals],
        "loops": {n: {"index": lp.index, "measure": lp.measure, "output": lp.output,
                      "gains": list(lp.gains), "plant": lp.plant, "relay": lp.relay,
                      **{k: getattr(lp, k) for k in LOOP_OPTIONAL}}
                  for n, lp in link.loops.items()},
        "status": plain(link.last_status),
        "health": plain(link.health()),
    }


def _num(v: float) -> str:
    return f"{v:.7g}"


def describe(data: dict) -> str:
    b = data["board"]
    out = [f"board     {b['board']}  firmware {b['firmware']}  rig {b['rig']}  protocol "
           f"{b['protocol']}" + ("  (SIMULATED)" if b["simulated"] else ""),
           f"port      {b['url']}",
           f"loop      {_num(b['rate_hz'])} Hz, watchdog {_num(b['watchdog_ms'])} ms", "",
           f"parameters ({len(data['params'])})"]
    rows = [["name", "value", "unit", "min", "max", "access"]]
    rows += [[n, _num(p["value"]), p["unit"], _num(p["min"]), _num(p["max"]),
              "rw" if p["writable"] else "ro"] for n, p in data["params"].items()]
    out += [table(rows), "", f"signals ({len(data['signals'])}, telemetry order)",
            table([[s["name"], s["unit"]] for s in data["signals"]]), "",
            f"loops ({len(data['loops'])})"]
    out.append(table([[n, f"{lp['measure']} -> {lp['output']}", "gains " + ",".join(lp["gains"]),
                       f"plant {lp['plant']}", f"relay {lp['relay']}",
                       " ".join(f"{k}={lp[k]}" for k in LOOP_OPTIONAL if lp.get(k))]
                      for n, lp in data["loops"].items()]))
    st = data["status"]
    if st:
        out += ["", f"status    motor {st['motor']}, mode {st['mode']}, fault "
                f"{st['fault'] or 'none'}, arm blocked by: {', '.join(st['why']) or 'nothing'}"]
    h = data["health"]
    lat = h["reply_latency_median_s"]
    out.append(f"link      {h['state']}, {h['rx_frames']} frames, "
               f"{sum(h['bad_frames'].values())} bad, {h['lost_frames']} lost, "
               f"board drops {h['board_drops']}, reply "
               + (f"{lat * 1e3:.1f} ms" if lat is not None else "-"))
    return "\n".join(out)


def run(args) -> int:
    with open_link(args) as link:
        if args.listen > 0:
            link.sleep(args.listen)
        data = collect(link)
    if args.json:
        print_json(data)
    else:
        print(describe(data))
    return 0

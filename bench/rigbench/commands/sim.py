"""``rigbench sim``: serve a simulated board on a pseudo-terminal and print its device path,
so any program — the rigbench UI in another terminal, a serial monitor, your own script —
opens it like a real board.
"""

from __future__ import annotations


def add_parser(subparsers):
    p = subparsers.add_parser(
        "sim", help="a simulated board on a pseudo-terminal",
        description=__doc__.split("\n\n")[0],
        epilog="examples: rigbench sim;  rigbench sim wheel --link /tmp/rig;  "
               "rigbench sim 'sim://balance?drive=torque&noise=2'")
    p.add_argument("rig", nargs="?", default="balance",
                   help="rig name (balance, wheel, plant) or a full sim:// URL "
                        "(default: balance)")
    p.add_argument("--link", metavar="PATH",
                   help="also make a symlink PATH to the device (removed on exit)")
    return p


def _stop_on_terminate(signum, frame):
    raise KeyboardInterrupt  # same clean stop as Ctrl-C: the symlink is removed


def run(args) -> int:
    import signal

    from rigbench.rig.pty import run_sim_server

    previous = signal.signal(signal.SIGTERM, _stop_on_terminate)
    try:
        return run_sim_server(args.rig, args.link)
    finally:
        signal.signal(signal.SIGTERM, previous)

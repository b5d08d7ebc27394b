"""The one program, ``eddyvigil``: sub-commands of DESIGN §5.

Each sub-command lives in its own module, which offers ``add_arguments(parser)`` and
``run(args) -> int`` (the exit code). This file only wires them together, importing a
module when its command is chosen so that ``eddyvigil --help`` stays fast.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

__all__ = ["main", "build_parser"]

#: command -> (module, one-line help)
COMMANDS = {
    "demo": ("eddyvigil.monitor.demo", "simulator + monitor + dashboard on the built-in scenario, in one go"),
    "simulate": ("eddyvigil.simulator.cli", "publish synthetic turbulence with known truth"),
    "watch": ("eddyvigil.monitor.watch", "monitor a live stream"),
    "replay": ("eddyvigil.monitor.replay", "feed a recording through the same path as live data"),
    "export": ("eddyvigil.monitor.export", "write recorded samples and summaries to open formats"),
    "combine": ("eddyvigil.monitor.combine", "merge repeats of a point (states, recordings)"),
    "budget": ("eddyvigil.monitor.budget_cmd", "k budget across a traverse, with uncertainty"),
    "report": ("eddyvigil.monitor.report", "one offline HTML report of a run"),
    "plan": ("eddyvigil.monitor.plan_cmd", "share the facility time left among remaining points"),
    "reprocess": ("eddyvigil.monitor.reprocess", "replay many recordings at once (Dask) into one summary"),
    "keys": ("eddyvigil.monitor.keys", "write CURVE key pairs for the --curve-* options"),
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="eddyvigil",
        description="Live convergence monitor for turbulence statistics.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name, (module_name, help_text) in COMMANDS.items():
        module = importlib.import_module(module_name)
        p = sub.add_parser(
            name,
            help=help_text,
            description=(module.__doc__ or help_text).strip().splitlines()[0],
            epilog=getattr(module, "EPILOG", None),
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        module.add_arguments(p)
        p.set_defaults(_module=module)
    return parser


#: BLAS thread counts the commands run with unless the environment says otherwise
ONE_BLAS_THREAD = {"OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}


def main(argv: list[str] | None = None) -> int:
    # Before anything loads numpy: the blocking matrices are 34 x 34, a second BLAS thread
    # never speeds them up, and OpenBLAS's idle threads spin. Measured with perf on the
    # 2-core reference machine: 13 % of the monitor's samples were in blas_thread_server,
    # CPU taken from the publisher when it runs on the same machine.
    for name, value in ONE_BLAS_THREAD.items():
        os.environ.setdefault(name, value)
    parser = build_parser()
    args = parser.parse_args(argv)
    return int(args._module.run(args) or 0)


if __name__ == "__main__":
    sys.exit(main())

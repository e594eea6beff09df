"""The ``marl-core`` command line. The only module that reads argv or prints for people.

Commands:
    marl-core demo [--out DIR] [--seed N] [--agents N] [--steps N] [--no-gif]
    marl-core envs [--json]

A user mistake (a bad option, a bad game parameter) prints one line on stderr and exits with status 2.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence

from envs.errors import EnvError

__all__ = ["main"]


class UsageError(Exception):
    """A command-line mistake: printed as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse's own errors become one line and exit 2 as well
        raise UsageError(message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="marl-core", description="Train and study small teams of agents on social dilemmas.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    d = sub.add_parser("demo", help="scripted teams play harvest and cleanup; write GIFs, print metrics")
    d.add_argument("--out", default="runs/demo", help="directory for the GIFs (default: runs/demo)")
    d.add_argument("--seed", type=int, default=0, help="episode seed (default: 0)")
    d.add_argument("--agents", type=int, default=5, help="agents per team (default: 5)")
    d.add_argument("--steps", type=int, default=1000, help="episode length, max_cycles (default: 1000)")
    d.add_argument("--no-gif", action="store_true", help="skip the GIFs")
    e = sub.add_parser("envs", help="list the games and their parameters")
    e.add_argument("--json", action="store_true", help="print JSON instead of a table")
    return p


def _demo(args: argparse.Namespace) -> int:
    from marl_core.demo import run_demo

    rows = run_demo(args.out, seed=args.seed, num_agents=args.agents, max_cycles=args.steps,
                    gifs=not args.no_gif)
    head = f"{'game':<11} {'team':<14} {'return':>7} {'efficiency':>10} {'equality':>8} " \
           f"{'sustainability':>14} {'peace':>5} {'left':>4}"
    print(f"scripted teams, {args.agents} agents, {args.steps} steps, seed {args.seed}")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r['game']:<11} {r['team']:<14} {sum(r['returns'].values()):>7.0f} {r['efficiency']:>10.3f} "
              f"{r['equality']:>8.3f} {r['sustainability']:>14.1f} {r['peace']:>5.2f} "
              f"{r['resources_left']:>4}")
    print("left = resources standing at the end. Efficiency: team reward per step; equality: 1 - Gini of the\n"
          "returns; sustainability: mean step of a reward; peace: agents not frozen per step.")
    gifs = [r["gif"] for r in rows if r["gif"]]
    if gifs:
        print("GIFs: " + ", ".join(gifs))
    print("These are scripted agents in a toy world, not people: read the numbers as facts about the game.")
    return 0


def _envs(args: argparse.Namespace) -> int:
    import envs

    table = envs.list_envs()
    if args.json:
        print(json.dumps(table, indent=2))
        return 0
    for game, params in table.items():
        print(game)
        for p in params:
            print(f"  {p['name']:<22} {p['type']:<6} {str(p['default']):<32} {p['doc']}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    try:
        args = _parser().parse_args(argv)
        return {"demo": _demo, "envs": _envs}[args.command](args)
    except (UsageError, EnvError) as err:
        print(f"marl-core: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())

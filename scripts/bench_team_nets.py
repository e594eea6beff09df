"""How to run N agents' own networks in one step: a loop over agents, or one pass over stacked weights; prints JSON.

This is a benchmark, not a test: it measures and prints, and exits 0.

Four ways to evaluate N independent copies of ``marl_core.nets.AgentNet`` (3x3 convolutions, then two
linear layers) on ``(K, N, C, H, W)`` observations, with identical arithmetic (checked here: outputs
within ``1e-5`` of one another):

``loop``     ``marl_core.nets.AgentNets``: a Python loop over the agents' nets (what the learners use).
``grouped``  the weights stacked, each conv layer one grouped convolution (``groups=N``), each linear layer
             one ``torch.baddbmm``.
``vmap``     ``torch.func.vmap`` of ``functional_call`` over ``stack_module_state`` of the N nets.
``unfold``   each conv layer as ``F.unfold`` then one batched matrix product over the agents.

For each: milliseconds per forward pass without gradients on ``--act-batch`` copies (what acting costs
per vector step) and per forward-and-backward pass on ``--train-batch`` joint steps (what a minibatch
costs), best of ``--repeats`` timed blocks, one torch thread by default.

Usage: ``python scripts/bench_team_nets.py [--agents 5] [--view-radius 7] [--channels 9] [--act-batch 64]
[--train-batch 512]``
"""

from __future__ import annotations

import argparse
import copy
import json
import platform
import sys
import time
from pathlib import Path

import torch
import torch.nn.functional as F
from torch import nn

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from _common import cpu_name  # noqa: E402

from marl_core.nets import AgentNets  # noqa: E402


class Stacked(nn.Module):
    """N AgentNets (no agent id, no dueling head, image observations) with stacked weights."""

    def __init__(self, nets: list[nn.Module]):
        super().__init__()
        bodies = [list(n.encoder.body) for n in nets]
        convs = [k for k, m in enumerate(bodies[0]) if isinstance(m, nn.Conv2d)]
        self.strides = [bodies[0][k].stride[0] for k in convs]
        self.obs_shape = nets[0].encoder.obs_shape
        with torch.no_grad():
            self.conv_w = nn.ParameterList(nn.Parameter(torch.cat([b[k].weight for b in bodies])) for k in convs)
            self.conv_b = nn.ParameterList(nn.Parameter(torch.cat([b[k].bias for b in bodies])) for k in convs)
            lins = [[n.trunk[0] for n in nets], [n.head for n in nets]]
            self.lin_w = nn.ParameterList(nn.Parameter(torch.stack([m.weight.t() for m in ms]).contiguous())
                                          for ms in lins)
            self.lin_b = nn.ParameterList(nn.Parameter(torch.stack([m.bias for m in ms]).unsqueeze(1))
                                          for ms in lins)

    def _linear(self, x: torch.Tensor) -> torch.Tensor:
        x = F.relu(torch.baddbmm(self.lin_b[0], x, self.lin_w[0]))
        return torch.baddbmm(self.lin_b[1], x, self.lin_w[1]).transpose(0, 1)

    def grouped(self, obs: torch.Tensor) -> torch.Tensor:
        K, N = obs.shape[:2]
        x = obs.float().reshape(K, N * self.obs_shape[0], *self.obs_shape[1:])
        for w, b, s in zip(self.conv_w, self.conv_b, self.strides):
            x = F.relu(F.conv2d(x, w, b, stride=s, padding=1, groups=N))
        return self._linear(x.reshape(K, N, -1).transpose(0, 1))

    def unfold(self, obs: torch.Tensor) -> torch.Tensor:
        K, N = obs.shape[:2]
        x = obs.float().transpose(0, 1).reshape(N * K, *self.obs_shape)
        for w, b, s in zip(self.conv_w, self.conv_b, self.strides):
            C, H = x.shape[1], x.shape[2]
            cols = F.unfold(x, 3, padding=1, stride=s)
            L = cols.shape[-1]
            cols = cols.reshape(N, K, C * 9, L).permute(0, 2, 1, 3).reshape(N, C * 9, K * L)
            y = torch.baddbmm(b.reshape(N, -1, 1), w.reshape(N, -1, C * 9), cols)
            side = (H + 2 - 3) // s + 1
            x = F.relu(y).reshape(N, -1, K, side, side).permute(0, 2, 1, 3, 4).reshape(N * K, -1, side, side)
        return self._linear(x.reshape(N, K, -1))


def _best_ms(fn, repeats: int, calls: int) -> float:
    fn()
    best = float("inf")
    for _ in range(repeats):
        t = time.perf_counter()
        for _ in range(calls):
            fn()
        best = min(best, (time.perf_counter() - t) / calls * 1e3)
    return round(best, 3)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--agents", type=int, default=5)
    ap.add_argument("--view-radius", type=int, default=7)
    ap.add_argument("--channels", type=int, default=9, help="observation channels (harvest: 9)")
    ap.add_argument("--act-batch", type=int, default=64)
    ap.add_argument("--train-batch", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    torch.set_num_threads(args.threads)
    torch.manual_seed(0)
    N, side = args.agents, 2 * args.view_radius + 1
    kw = dict(obs_shape=(args.channels, side, side), num_actions=8, hidden=128, conv_channels=[16, 32],
              conv_strides=[2, 2])
    loop = AgentNets(N, False, dueling=False, **kw)
    nets = [n for n in loop.nets]
    stacked = Stacked(nets)
    from torch.func import functional_call, stack_module_state, vmap

    params, buffers = stack_module_state([copy.deepcopy(n) for n in nets])
    base = copy.deepcopy(nets[0]).to("meta")
    batched = vmap(lambda p, b, x: functional_call(base, (p, b), (x,)))
    ways = {"loop": loop, "grouped": stacked.grouped,
            "vmap": lambda o: batched(params, buffers, o.transpose(0, 1).float()).transpose(0, 1),
            "unfold": stacked.unfold}
    small = torch.randint(0, 2, (args.act_batch, N, *kw["obs_shape"]), dtype=torch.uint8)
    big = torch.randint(0, 2, (args.train_batch, N, *kw["obs_shape"]), dtype=torch.uint8)
    with torch.no_grad():
        ref = loop(small)
        diffs = {k: float((f(small) - ref).abs().max()) for k, f in ways.items()}
    result = {}
    for name, f in ways.items():
        with torch.no_grad():
            act = _best_ms(lambda f=f: f(small), args.repeats, 50)
        train = _best_ms(lambda f=f: f(big).sum().backward(), args.repeats, 5)
        result[name] = {"act_ms": act, "forward_backward_ms": train, "max_abs_diff_vs_loop": diffs[name]}
    print(json.dumps({"python": platform.python_version(), "torch": torch.__version__, "cpu": cpu_name(),
                      "threads": args.threads, "agents": N, "obs_shape": list(kw["obs_shape"]),
                      "act_batch": args.act_batch, "train_batch": args.train_batch, "ways": result,
                      "fastest_act": min(result, key=lambda k: result[k]["act_ms"]),
                      "fastest_train": min(result, key=lambda k: result[k]["forward_backward_ms"])}, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())

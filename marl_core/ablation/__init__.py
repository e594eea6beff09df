"""The ablation harness: grids of training runs over learners, sharing and game rules across seeds: spec
expansion, ledger, runners, statistics, reports.

Import the submodules directly (``from marl_core.ablation import stats``); this package imports none of
them, so loading the statistics does not pull in torch or the training stack.
"""

__all__: list[str] = []

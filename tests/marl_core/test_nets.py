"""The grid-window encoder's strides (learner.conv_strides) and policies saved before the key existed."""

from __future__ import annotations

import pytest

from marl_core.config import parse_config
from marl_core.errors import ConfigError
from marl_core.nets import Encoder, build_net, net_description


@pytest.mark.parametrize("strides, out_dim", [
    (None, 32 * 8 * 8),  # stride 1 then 2 on 15x15: 15 -> 15 -> 8 (padding 1, kernel 3; hand-computed)
    ((1, 2), 32 * 8 * 8),
    ((2, 2), 32 * 4 * 4),  # 15 -> 8 -> 4
])
def test_encoder_output_size_follows_the_strides(strides, out_dim):
    assert Encoder((9, 15, 15), 128, (16, 32), strides).out_dim == out_dim


def test_a_description_without_strides_builds_the_first_release_encoder():
    desc = net_description((9, 11, 11), 7, 32, [8, 16], 0, False)
    assert desc["conv_strides"] == [1, 2]
    old = {k: v for k, v in desc.items() if k != "conv_strides"}  # as policies saved before the key
    assert build_net(old).encoder.conv_strides == (1, 2)
    lean = build_net(net_description((9, 11, 11), 7, 32, [8, 16], 0, False, conv_strides=[2, 2]))
    assert lean.encoder.conv_strides == (2, 2)


def test_one_stride_per_conv_layer():
    with pytest.raises(ConfigError, match=r"^learner\.conv_strides = \[2\] is not allowed: expected one "
                                          r"stride per conv layer: 2"):
        parse_config({"learner": {"conv_strides": [2]}})
    # left out: 2 for every layer (config.py DEFAULT_STRIDE); null: the first release's 1 then 2
    assert parse_config({"learner": {"conv_channels": [8, 8, 16]}}).learner.conv_strides == [2, 2, 2]
    first_release = {"learner": {"conv_channels": [8, 8, 16], "conv_strides": None}}
    assert parse_config(first_release).learner.conv_strides is None
    assert parse_config({"learner": {"kind": "maddpg"}}).learner.conv_strides is None  # maddpg's default

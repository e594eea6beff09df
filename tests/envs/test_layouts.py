"""Bundled layouts (envs/layouts/) and the parameter listing of the registry (envs.list_envs)."""

from __future__ import annotations

import numpy as np
import pytest

import envs
import envs.cleanup_v0 as cleanup
import envs.harvest_v0 as harvest
from envs.errors import LayoutError
from envs.layouts import Layout, bundled_layouts, load_layout

LAYOUTS = bundled_layouts()
GRID_GAMES = {"harvest": harvest, "cleanup": cleanup}


def game_of(layout_name: str):
    return GRID_GAMES[layout_name.split("_")[0]]


def test_bundled_layouts_are_the_documented_six():
    # envs/layouts.py docstring: the bundled layouts
    assert sorted(LAYOUTS) == sorted(["harvest_tiny", "harvest_small", "harvest_standard",
                                      "cleanup_tiny", "cleanup_small", "cleanup_standard"])


@pytest.mark.parametrize("name", LAYOUTS, ids=LAYOUTS)
def test_bundled_layout_parses(name):
    layout = load_layout(name)
    assert isinstance(layout, Layout)
    H, W = layout.shape
    assert H >= 3 and W >= 3
    for layer in (layout.wall, layout.orchard, layout.river, layout.resource, layout.waste):
        assert layer.shape == (H, W) and layer.dtype == bool
    # legend in envs/layouts.py: resources start on orchard cells, waste on river cells; walls are neither
    assert not (layout.resource & ~layout.orchard).any()
    assert not (layout.waste & ~layout.river).any()
    assert not (layout.wall & (layout.orchard | layout.river)).any()
    assert len(layout.spawn) >= 1
    assert not layout.wall[tuple(layout.spawn.T)].any()
    assert not layout.orchard[tuple(layout.spawn.T)].any()
    # every bundled map is closed by walls (cells outside count as walls anyway; a closed border is our
    # convention for bundled maps, common practice, no source)
    assert layout.wall[0].all() and layout.wall[-1].all() and layout.wall[:, 0].all() and layout.wall[:, -1].all()


@pytest.mark.parametrize("name", LAYOUTS, ids=LAYOUTS)
def test_game_accepts_its_layout_with_every_spawn_point_used(name):
    module = game_of(name)
    spawns = len(load_layout(name).spawn)
    game = module.vector_env(2, layout=name, num_agents=spawns, view_radius=3)
    obs, _ = game.reset(seed=0)
    assert obs.shape == (2, spawns, 9, 7, 7)  # harvest_v0 / cleanup_v0 docstrings: (9, 2r+1, 2r+1)
    # envs/grid.py docstring: agents start at distinct spawn points
    for b in range(2):
        at = {tuple(p) for p in game.agent_positions(b).tolist()}
        assert at == {tuple(s) for s in load_layout(name).spawn.tolist()}
    rng = np.random.default_rng(0)
    for _ in range(20):
        game.step(rng.integers(0, game.action_space.n, size=(2, spawns)))
    # envs/grid.py docstring: two agents never share a cell
    for b in range(2):
        on_map = game.agent_positions(b)[~game.out[b]]
        assert len({tuple(p) for p in on_map.tolist()}) == len(on_map)


@pytest.mark.parametrize("name", [n for n in LAYOUTS if n.startswith("harvest")])
def test_cleanup_rejects_harvest_layouts(name):
    # cleanup_v0: cleanup needs river cells; the harvest maps have none
    with pytest.raises(LayoutError, match="river"):
        cleanup.vector_env(1, layout=name, num_agents=1)


@pytest.mark.parametrize("game", ["harvest", "cleanup"])
def test_sizes_grow_from_tiny_to_standard(game):
    maps = [load_layout(f"{game}_{size}") for size in ("tiny", "small", "standard")]
    areas = [m.shape[0] * m.shape[1] for m in maps]
    open_cells = [int((~m.wall).sum()) for m in maps]
    # envs/layouts.py docstring names tiny, small and standard; our reading: strictly larger maps in that
    # order (common practice, no source)
    assert areas[0] < areas[1] < areas[2]
    assert open_cells[0] < open_cells[1] < open_cells[2]
    assert [len(m.spawn) for m in maps] == sorted(len(m.spawn) for m in maps)


def _patch_gaps(layout: Layout) -> tuple[list[int], float]:
    """Sizes of the orchard patches, and the smallest squared distance between cells of different patches."""
    labels = layout.patches()
    cells = np.argwhere(labels >= 0)
    which = labels[labels >= 0]
    d2 = ((cells[:, None, :] - cells[None, :, :]) ** 2).sum(axis=-1)
    apart = which[:, None] != which[None, :]
    return [int((labels == k).sum()) for k in range(labels.max() + 1)], float(d2[apart].min()) if apart.any() \
        else float("inf")


@pytest.mark.parametrize("name", [n for n in LAYOUTS if n.startswith("harvest")])
def test_harvest_patches_can_each_be_stripped_bare(name):
    sizes, gap2 = _patch_gaps(load_layout(name))
    radius = harvest.vector_env(1).params["regrow_radius"]
    # harvest_v0 docstring (regrowth): only resources within regrow_radius count, so patches further apart
    # than that never reseed each other, and a patch stripped bare stays bare
    assert gap2 > radius ** 2
    if not name.endswith("tiny"):
        # envs/layouts.py docstring: patches of varied sizes, one large beside small ones
        assert len(set(sizes)) >= 4 and max(sizes) >= 3 * min(sizes)


@pytest.mark.parametrize("name", [n for n in LAYOUTS if n.startswith("cleanup")])
def test_cleanup_river_runs_between_two_orchards(name):
    layout = load_layout(name)
    sizes, _ = _patch_gaps(layout)
    cols = np.nonzero(layout.river.any(axis=0))[0]
    left, right = np.nonzero(layout.orchard.any(axis=0))[0][[0, -1]]
    # envs/layouts.py docstring: the river winds between an orchard on each bank
    assert len(sizes) == 2 and sizes[0] == sizes[1]
    assert left < cols.min() and cols.max() < right
    assert layout.river.any(axis=1)[1:-1].all()  # it crosses the map from top to bottom


@pytest.mark.parametrize(("module", "layout"), [(harvest, "harvest_small"), (cleanup, "cleanup_small")],
                         ids=["harvest", "cleanup"])
def test_default_layout(module, layout):
    # harvest_v0 / cleanup_v0 docstrings (arguments): layout defaults to harvest_small / cleanup_small
    assert module.vector_env(1).params["layout"] == layout


def test_default_agents_fit_the_default_layouts():
    # harvest_v0 / cleanup_v0 docstrings: num_agents defaults to 5; the default maps hold that many
    for module in (harvest, cleanup):
        game = module.vector_env(1)
        game.reset(seed=0)
        assert game.num_agents == 5


# --- envs.list_envs ---------------------------------------------------------------------------------------

KINDS = {"int": int, "float": float, "bool": bool, "str": str, "list": list}


@pytest.mark.parametrize("name", envs.GAMES, ids=envs.GAMES)
def test_list_envs_describes_every_parameter(name):
    listing = envs.list_envs()
    assert list(listing) == list(envs.GAMES)
    table = envs.game_module(name).PARAMS
    entries = listing[name]
    # envs/__init__.py list_envs docstring: name, type, default, allowed values and meaning of each
    assert [e["name"] for e in entries] == [p.name for p in table]
    for entry, param in zip(entries, table, strict=True):
        assert {"name", "type", "default", "doc", "allowed"} <= set(entry)
        assert entry["type"] in KINDS and KINDS[entry["type"]] is param.kind
        assert entry["default"] == param.default
        assert isinstance(entry["doc"], str) and entry["doc"].strip()
        assert isinstance(entry["allowed"], str) and entry["allowed"]
        # every default is itself an allowed value (None means "not given", e.g. matrix_v0's payoffs)
        if param.default is not None:
            assert param.validate(param.default, name) == param.default


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest", "cleanup"])
def test_list_envs_matches_the_game(module):
    entries = {e["name"]: e for e in envs.list_envs()[module.NAME]}
    params = module.vector_env(1).params
    # envs/params.py: the same table fills in the defaults, so the listing is what a game gets by default
    assert set(entries) == set(params)
    for key, value in params.items():
        assert entries[key]["default"] == value


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest", "cleanup"])
def test_every_parameter_is_in_a_docstring_arguments_table(module):
    # STYLE.md item 1: each env module's docstring has an arguments table; cleanup's refers to harvest's
    # for the shared grid arguments
    text = (module.__doc__ or "") + (harvest.__doc__ or "")
    for entry in envs.list_envs()[module.NAME]:
        assert f"\n{entry['name']} " in text, entry["name"]

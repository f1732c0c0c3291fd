"""Every YAML loader refuses alias bombs, recursive anchors and runaway nesting before
building values, with a FILE:LINE error; files that use a few aliases still load."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from kinetome.envs.errors import EnvConfigError
from kinetome.envs.starts import load_start
from kinetome.envs.variants import load_variant
from kinetome.envs.yaml_limits import MAX_YAML_VALUES, YamlTooLarge, compose_within_limits
from kinetome.library.checker.chain import load_chain
from kinetome.library.errors import InvalidInputError
from kinetome.library.spec_load import load_spec
from kinetome.trainers.config import load_train_config


def _bomb(levels: int = 9, width: int = 10) -> str:
    """``width ** levels`` values from a few hundred bytes (the classic "billion laughs" shape)."""
    lines = ["l0: &l0 [" + ", ".join(["x"] * width) + "]"]
    for level in range(1, levels):
        lines.append(f"l{level}: &l{level} [" + ", ".join([f"*l{level - 1}"] * width) + "]")
    lines.append("name: [" + ", ".join([f"*l{levels - 1}"] * width) + "]")
    return "\n".join(lines) + "\n"


BOMB = _bomb()
RECURSIVE = "name: &a [1, *a]\n"
DEEP = "name: " + "[" * 5000 + "]" * 5000 + "\n"
LOADERS = {
    "spec": (load_spec, InvalidInputError),
    "chain": (load_chain, InvalidInputError),
    "training config": (load_train_config, InvalidInputError),
    "variant": (load_variant, EnvConfigError),
    "initial states": (load_start, EnvConfigError),
}


@pytest.mark.parametrize("kind", LOADERS)
@pytest.mark.parametrize(
    "text, message",
    [
        (BOMB, f"expands to more than {MAX_YAML_VALUES} values through anchors and aliases"),
        (RECURSIVE, "recursive anchor"),
        (DEEP, "nested too deeply"),
    ],
    ids=["alias-bomb", "recursive-anchor", "deep-nesting"],
)
def test_every_loader_refuses_oversized_yaml(tmp_path: Path, kind: str, text: str, message: str) -> None:
    load, error = LOADERS[kind]
    path = tmp_path / "hazard.yaml"
    path.write_text(text)
    with pytest.raises(error) as info:
        load(path)
    assert message in str(info.value)
    assert str(path) in str(info.value)


def test_bomb_size_is_counted_on_the_graph_not_built() -> None:
    assert len(BOMB) < 1000
    with pytest.raises(YamlTooLarge) as info:
        compose_within_limits(BOMB)
    assert info.value.line is not None and info.value.line >= 2


def test_files_over_the_byte_cap_are_refused() -> None:
    with pytest.raises(YamlTooLarge, match=r"at most 1048576 bytes, got 1048577"):
        compose_within_limits("#" * (1 << 20) + "\n")


def test_a_few_aliases_within_the_cap_still_load() -> None:
    loader, node = compose_within_limits(_bomb(levels=3, width=10))  # 10**4 values
    try:
        data = loader.construct_document(node)
    finally:
        loader.dispose()
    assert len(data["name"]) == 10 and data["name"][0][0][0] == ["x"] * 10


def test_cli_refuses_a_bomb_with_exit_2(tmp_path: Path) -> None:
    path = tmp_path / "bomb.yaml"
    path.write_text(BOMB)
    done = subprocess.run(
        [sys.executable, "-m", "kinetome.library.cli.main", "register", str(path), "--store", str(tmp_path / "s")],
        capture_output=True, text=True, timeout=60, check=False,
    )
    assert done.returncode == 2, done.stderr
    assert "anchors and aliases" in done.stderr and "Traceback" not in done.stderr

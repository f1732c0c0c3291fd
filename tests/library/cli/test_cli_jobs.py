"""run, fit, check and retrain as a user calls them: outputs, JSON and exit codes."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from scipy.stats import binomtest

from kinetome.library.api import open_store
from kinetome.library.cli.main import main

ROOT = Path(__file__).resolve().parents[3]
CONFIGS = ROOT / "configs"


@pytest.fixture(scope="module")
def store(tmp_path_factory) -> str:
    root = str(tmp_path_factory.mktemp("jobs") / "store")
    assert main(["--store", root, "register", *map(str, sorted((CONFIGS / "skills").glob("*.yaml")))]) == 0
    return root


def _json(capsys, *args: str) -> tuple[int, dict]:
    code = main(list(args))
    return code, json.loads(capsys.readouterr().out)


def test_run_reports_exact_interval(store, capsys) -> None:
    code, s = _json(capsys, "--store", store, "run", "arm-lift", "--episodes", "40", "--json")
    assert code == 0 and s["episodes"] == 40
    k = s["successes"]
    ref = binomtest(k, 40).proportion_ci(confidence_level=0.95, method="exact")  # scipy reference
    assert s["success_interval"] == pytest.approx([ref.low, ref.high], abs=1e-9)
    assert s["outcomes"]["arm-lift@1"].get("stopped") == k and s["success_rate"] == k / 40
    assert s["schema"] == "kinetome.run/1" and s["caution"].startswith("Caution:")


def test_run_flags_declared_limits(store, capsys) -> None:
    code, s = _json(capsys, "--store", store, "run", "walker-walk", "--episodes", "8", "--json")
    assert code == 0
    torque = next(r for r in s["limits"] if r["limit"] == "torque")
    assert torque["declared"] == 12.0 and torque["worst"] <= 12.0 + 1e-9  # actions are clipped to ctrlrange
    assert "standards for that type of machine" in s["caution"]  # the walker is a legged robot


def test_run_limits_table_never_reads_like_a_pass(capsys) -> None:
    from kinetome.library.cli.run_cmds import format_run
    from kinetome.library.safety import CAUTION

    summary = {
        "skill": "s@1", "env": "e", "variant": None, "episodes": 8, "successes": 8, "success_rate": 1.0,
        "success_interval": [0.63, 1.0], "confidence": 0.95, "caution": CAUTION,
        "duration": {"mean": 5.0, "p10": 5, "p50": 5, "p90": 5, "max": 5},
        "return": {"mean": 1.0, "std": 0.0, "gamma": 0.99, "discounted_mean": 1.0}, "outcomes": {"s@1": {"stopped": 8}},
        "limits": [
            {"skill": "s@1", "limit": "torque", "declared": 12.0, "worst": 11.0, "episodes_over": 0, "episodes": 8},
            {"skill": "s@1", "limit": "joint_speed", "declared": 1.0, "worst": 2.5, "episodes_over": 3, "episodes": 8},
        ],
    }
    text = format_run(summary)
    rows = {line.split()[0]: line for line in text.splitlines() if line.startswith(("torque", "joint_speed"))}
    assert rows["torque"].endswith("not exceeded in 8 simulated episodes")
    assert rows["joint_speed"].endswith("exceeded in 3 of 8")
    assert " ok" not in text and "not enforced by kinetome; not a safety function" in text
    assert text.endswith(CAUTION) and "8/8 = 1.000" in text


def test_fit_attaches_models_shown_by_show(store, capsys) -> None:
    code, r = _json(capsys, "--store", store, "fit", "arm-lift", "--episodes", "60", "--json")
    assert code == 0 and r["model_ref"] == "arm-lift@1/option-models#1"
    code, view = _json(capsys, "--store", store, "show", "arm-lift", "--json")
    assert [m["ref"] for m in view["models"]] == ["arm-lift@1/option-models#1"]


@pytest.mark.parametrize("chain, expected", [("arm-lift-reach-place", 0), ("arm-place-release", 1)])
def test_check_exit_codes(store, capsys, chain, expected) -> None:
    code = main(["--store", store, "check", str(CONFIGS / "chains" / f"{chain}.yaml"), "--episodes", "60"])
    out = capsys.readouterr().out
    assert code == expected
    assert "ISO 12100" in " ".join(out.split())  # the caution, wrapped


def test_check_bad_input_exit_2(store, tmp_path, capsys) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text("name: x\ntask: {env: kinetome/BenchArm-v0}\nskills: [arm-lift, arm-teleport]\n")
    assert main(["--store", store, "check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bad.yaml:3: skills[1]:" in err and "arm-teleport" in err


def test_check_json_and_out_folder(store, tmp_path, capsys) -> None:
    out = tmp_path / "check"
    code = main(["--store", store, "check", str(CONFIGS / "chains" / "arm-place-release.yaml"), "--episodes", "80", "--json", "--out", str(out)])
    data = json.loads(capsys.readouterr().out)
    assert code == 1 and data["exit_code"] == 1 and data["schema"] == "kinetome.check/1"
    assert "ISO 12100" in data["caution"] and (out / "result.json").is_file() and (out / "summary.txt").is_file()


def test_retrain_stores_child_with_lineage(store, tmp_path, capsys) -> None:
    code, r = _json(
        capsys, "--store", store, "retrain", "arm-reach-tray",
        "--variant", str(CONFIGS / "variants" / "heavy_payload.yaml"),
        "--initial-states", str(CONFIGS / "initial_states" / "arm_clearance.yaml"),
        "--config", str(CONFIGS / "training" / "demo_quick.yaml"),
        "--budget", "8192", "--out", str(tmp_path / "rt"), "--json",
    )
    assert code == 0 and r["child"] == "arm-reach-tray@2" and r["lineage"] == ["arm-reach-tray@2", "arm-reach-tray@1"]
    assert Path(r["curve_csv"]).read_text().splitlines()[0].startswith("update")
    assert Path(r["curve_png"]).read_bytes()[:4] == b"\x89PNG"
    code, view = _json(capsys, "--store", store, "show", "arm-reach-tray@2", "--json")
    meta = view["meta"]
    assert view["reason"] == "retrained" and view["parent"] == "arm-reach-tray@1"
    assert r["schema"] == "kinetome.retrain/1" and r["is_new"] and r["env_steps"] == 8192 and "ISO 12100" in r["caution"]
    assert r["after"]["successes"] == round(r["after"]["success_rate"] * r["after"]["episodes"])
    assert meta["variant"]["name"] == "heavy_payload" and meta["seed"] == 0 and meta["env_steps"] == 8192 and meta["method"] == "retrain"
    assert {"metrics_before", "metrics_after"} <= set(meta)
    # the config, seed, task files and software versions are files of the version (covered by its identity)
    assert {"record.json", "evaluation.json", "variant.yaml", "initial_states.yaml"} <= {f["role"] for f in view["files"]}
    assert {row["task"] for row in r["promotion"]["tasks"]} == {"heavy_payload", "nominal"}
    assert set(r["current_for"]) <= {"heavy_payload", "nominal"} and view["current_for"] == sorted(r["current_for"])
    assert view["models"], "the child's option models are refitted on the variant"


def test_retrain_requires_variant(store, capsys) -> None:
    with pytest.raises(SystemExit) as info:
        main(["--store", store, "retrain", "arm-reach-tray"])
    assert info.value.code == 2


@pytest.mark.parametrize(
    "text, expected",
    [
        ("name: x\npayload_mas: 1.0\n", ":2: payload_mas: unknown field; did you mean 'payload_mass'? valid fields: name,"),
        ("name: x\npayload_mass: -1\n", ":2: payload_mass: must be > 0 kg, got -1"),
        ("name: x\ntimestep: 0\n", ":2: timestep:"),
    ],
)
def test_bad_variant_exit_2_with_reason(store, tmp_path, capsys, text, expected) -> None:
    bad = tmp_path / "variant.yaml"
    bad.write_text(text)
    assert main(["--store", store, "run", "arm-lift", "--variant", str(bad), "--episodes", "4"]) == 2
    err = capsys.readouterr().err
    assert expected in err and "Traceback" not in err


def test_train_options_stores_children_and_reports_durations(store, tmp_path, capsys) -> None:
    text = (CONFIGS / "training" / "options_small.yaml").read_text().replace("env_step_budget: 32768", "env_step_budget: 4096")
    config = tmp_path / "options_tiny.yaml"
    config.write_text(text)
    code, r = _json(capsys, "--store", store, "train", str(config), "--out", str(tmp_path / "train"), "--json")
    assert code == 0 and r["env_steps"] == 4096 and r["schema"] == "kinetome.train/1" and r["caution"].startswith("Caution:")
    assert r["mean_skill_duration"] >= 1.0 and 0.0 <= r["stop_rate"] <= 1.0
    for child in r["children"]:
        code, view = _json(capsys, "--store", store, "show", child, "--json")
        assert view["reason"] == "retrained" and view["parent"].split("@")[0] == child.split("@")[0]
        assert view["meta"]["method"] == "train" and view["meta"]["variant"] is None and "stop_rate" in view["meta"]
        # the same kind of record as a retrain child: parent identity, input file digests, config, seed, code, software
        record = json.loads(open_store(store).read_file(child, "record.json"))
        parent = open_store(store).get(view["parent"])
        assert record["schema"] == "kinetome.train-record/1" and record["method"] == "train"
        assert record["parent"] == {"ref": parent.ref, "identity": parent.identity}
        assert [t["ref"] for t in record["trained_with"]] == r["skills"] and record["seed"] == record["config"]["seed"]
        assert record["training_file"]["sha256"] == hashlib.sha256(config.read_bytes()).hexdigest()
        assert record["config"]["env_step_budget"] == 4096 and {"numpy", "torch", "mujoco"} <= set(record["software"])
        assert "code" in record
    # trained in "learned" stop mode: each child runs its own learned stop, and the policy over skills runs as a chooser
    from kinetome.library.api import load

    loaded = [load(child, store=open_store(store)) for child in r["children"]]
    assert [s.learned_stop.mode for s in loaded] == ["learned"] * 3 and [s.learned_stop.index for s in loaded] == [0, 1, 2]
    code, run = _json(capsys, "--store", store, "run", r["children"][1], "--chooser", "--episodes", "6", "--json")
    assert code == 0 and run["schema"] == "kinetome.run-chooser/1" and run["skills"] == r["children"]
    assert run["chooser"] == r["chooser"].replace(r["children"][0], r["children"][1]) and run["episodes"] == 6
    assert sum(run["outcomes"].values()) == 6 and "learned stop (learned)" in run["stops"][r["children"][0]]
    code = main(["--store", store, "run", r["children"][0], "--chooser", "--episodes", "4"])
    out = capsys.readouterr().out
    assert code == 0 and "SHARE OF STEPS" in out and "ISO 12100" in " ".join(out.split())
    assert main(["--store", store, "run", "arm-lift@1", "--chooser", "--episodes", "4"]) == 2
    assert "must have been trained together with other skills" in capsys.readouterr().err


def test_old_option_spelling_still_works_with_one_warning() -> None:
    import warnings

    from kinetome.library.cli.main import build_parser
    from kinetome.library.renamed_keys import RenamedKeyWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        new = build_parser().parse_args(["retrain", "x", "--variant", "v.yaml", "--budget", "5"])
        old = build_parser().parse_args(["retrain", "x", "--variant", "v.yaml", "--steps", "5"])
    assert new.env_step_budget == old.env_step_budget == 5
    assert [str(w.message) for w in caught if w.category is RenamedKeyWarning] == ["'--steps' is an old spelling; write '--budget' instead"]
    assert build_parser().parse_args(["retrain", "x", "--variant", "v.yaml"]).env_step_budget is None


@pytest.mark.parametrize("how", ["flag", "file"])
def test_retrain_refuses_a_deliberation_cost(store, tmp_path, capsys, how) -> None:
    # flat retraining has no switches: eta would change nothing yet be recorded, so it is refused
    args = ["--deliberation-cost", "0.5"]
    if how == "file":
        config = tmp_path / "eta.yaml"
        config.write_text("deliberation_cost: 0.5\n")
        args = ["--config", str(config)]
    before = [v.ref for v in open_store(store).history("arm-lift")]
    code = main(["--store", store, "retrain", "arm-lift", "--variant", str(CONFIGS / "variants" / "heavy_payload.yaml"),
                 "--out", str(tmp_path / "rt"), *args])
    err = capsys.readouterr().err
    assert code == 2 and "must be 0 for retrain, got 0.5" in err and "kinetome train" in err
    assert ("--deliberation-cost" in err) == (how == "flag")
    after = [v.ref for v in open_store(store).history("arm-lift")]
    assert after == before and not (tmp_path / "rt").exists()


@pytest.mark.parametrize("method, trainer, choice", [("auto", "cma-es", "default for cpg skills")])
def test_retrain_chooses_the_method_by_kind_and_says_which(store, tmp_path, capsys, method, trainer, choice) -> None:
    # (--method actor-critic on the same skill: choose_method below; the PD skill above runs the actor-critic)
    config = tmp_path / "walker.yaml"
    text = (CONFIGS / "training" / "walker_low_friction.yaml").read_text()
    config.write_text(text + "\nsearch_population: 4\nsearch_episodes: 2\n")
    code, r = _json(
        capsys, "--store", store, "retrain", "walker-walk", "--variant", str(CONFIGS / "variants" / "low_friction.yaml"),
        "--config", str(config), "--budget", "2048", "--method", method, "--out", str(tmp_path / method), "--json",
    )
    assert code == 0 and r["trainer"] == trainer and r["method_choice"] == choice
    code, view = _json(capsys, "--store", store, "show", r["child"], "--json")
    assert view["meta"]["trainer"] == trainer and view["meta"]["method"] == "retrain"
    roles = {f["role"] for f in view["files"]}
    assert ("normaliser.safetensors" in roles) == (trainer == "actor-critic")  # the search keeps no normalisers


def test_retrain_of_a_pd_skill_defaults_to_the_actor_critic() -> None:
    from kinetome.trainers.retrain import choose_method

    assert choose_method("joint_pd") == "actor-critic" and choose_method("cpg") == "search"
    assert choose_method("joint_pd", "search") == "search"
    from kinetome.library.errors import InvalidInputError

    with pytest.raises(InvalidInputError, match="--method must be auto or one of actor-critic, search"):
        choose_method("cpg", "evolution")


def test_threads_and_workers_mean_one_thing_on_retrain_and_train() -> None:
    import warnings

    from kinetome.library.cli.main import build_parser
    from kinetome.library.renamed_keys import RenamedKeyWarning

    # --threads: MuJoCo threads in this process; --workers: Ray worker processes (a retrain batch only).
    # The old --workers of a single retrain and of train (threads) still works, with one warning.
    from kinetome.library.cli.train_cmds import _single_retrain_threads
    from kinetome.library.errors import InvalidInputError

    parse = build_parser().parse_args
    assert _single_retrain_threads(parse(["retrain", "x", "--variant", "v.yaml", "--threads", "2"])) == 2
    assert _single_retrain_threads(parse(["retrain", "x", "--variant", "v.yaml"])) == 1
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert _single_retrain_threads(parse(["retrain", "x", "--variant", "v.yaml", "--workers", "3"])) == 3
        assert parse(["train", "c.yaml", "--workers", "2"]).threads == 2
    said = [str(w.message) for w in caught if w.category is RenamedKeyWarning]
    assert said == ["'--workers' without --variants is an old spelling; write '--threads' instead (--workers N means Ray "
                    "worker processes, for a batch)", "'--workers' is an old spelling; write '--threads' instead"]
    with pytest.raises(InvalidInputError, match="give only --threads"):
        _single_retrain_threads(parse(["retrain", "x", "--variant", "v.yaml", "--workers", "3", "--threads", "2"]))
    assert parse(["train", "c.yaml", "--threads", "2"]).threads == 2
    with pytest.raises(InvalidInputError, match="--threads must be at least 1"):
        _single_retrain_threads(parse(["retrain", "x", "--variant", "v.yaml", "--threads", "0"]))
    assert parse(["learn-initiation", "x", "--threads", "2"]).threads == 2
    with pytest.raises(SystemExit):
        parse(["learn-initiation", "x", "--workers", "2"])

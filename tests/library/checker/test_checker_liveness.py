"""A handoff composes only when the chain actually hands over (issue "Checker verdicts I").

Each test here failed on the checker before liveness, whole-chain requirements and distinct
trajectories were part of a verdict. Chain files are written in the wave-1 format on purpose
(``chain:``, top-level ``env``/``start``, ``steps:``, scalar ``require``): it must keep loading.
"""

from __future__ import annotations

import warnings

from checker_testkit import CONFIGS, write_arm_spec

from kinetome.library.checker import Verdict, check_chain

SKILLS = CONFIGS / "skills"
HOME = CONFIGS / "initial_states" / "arm_home.yaml"


def _old_chain(folder, name, steps, *, start=HOME, episodes=100):
    path = folder / f"{name}.yaml"
    start_text = start if isinstance(start, str) else str(start)
    path.write_text(
        f"chain: {name}\nenv: kinetome/BenchArm-v0\nstart: {start_text}\n"
        f"steps: [{', '.join(str(s) for s in steps)}]\nrequire: 0.95\nepisodes: {episodes}\n",
        encoding="utf-8",
    )
    return path


REACHED = "norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05"


def _reach(folder, name, max_steps):
    """A PD skill to the tray with arm-reach-tray's contract and its own step cap."""
    return write_arm_spec(folder, name, starts_when="norm(qvel) < 0.5", stops_when=REACHED, max_steps=max_steps)


def _check(path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # old spellings warn; test_checker_chain_file pins the warnings
        return check_chain(path, **kw)


def test_first_skill_that_always_times_out_is_not_exit_0(tmp_path):
    # Five steps cannot carry the arm from home to the tray (it needs about 40): every episode
    # times out. The stop region of the reach still lies inside arm-place's initiation set, so a
    # containment proof exists; it must not be mistaken for a handoff.
    short = _reach(tmp_path, "reach-five-steps", 5)
    path = _old_chain(tmp_path, "times-out", [short, SKILLS / "arm-place.yaml"])
    result = _check(path)
    assert result.exit_code != 0
    h = result.handoffs[0]
    assert h.verdict is Verdict.BREAKS
    assert h.decided_by == "sim"


def test_handoffs_fine_but_whole_chain_below_requirement_is_not_exit_0(tmp_path):
    # arm-lift hands over to the reach in every episode, but the reach (the last skill) times
    # out every time: no episode completes the chain.
    short = _reach(tmp_path, "reach-five-steps", 5)
    path = _old_chain(tmp_path, "never-finishes", [SKILLS / "arm-lift.yaml", short])
    result = _check(path, method="sim")
    assert result.handoffs[0].estimate.k == result.handoffs[0].estimate.n  # every handoff handed over
    assert result.exit_code != 0
    assert result.whole_chain.success.k == 0


def test_identical_deterministic_episodes_are_one_trial(tmp_path):
    # No start noise, mean actions: all 200 episodes are the same trajectory.
    path = _old_chain(
        tmp_path, "deterministic", [SKILLS / "arm-reach-tray.yaml", SKILLS / "arm-place.yaml"],
        start="{name: home_exact, nominal: {pose: home}}",
    )
    result = _check(path, method="sim", episodes=200)
    stats = result.whole_chain
    assert stats.episodes == 200
    assert stats.distinct_trajectories == 1
    h = result.handoffs[0]
    assert h.estimate.n == 1  # one trial, no bound from repetition
    assert "single start" in h.reason
    data = result.to_dict()
    assert data["whole_chain"]["distinct_trajectories"] == 1


def _reach_from_anywhere(folder):
    return write_arm_spec(folder, "reach-from-anywhere", starts_when="norm(qvel) < 100", stops_when=REACHED, max_steps=200)


def test_a_step_allowed_to_time_out_hands_over_and_one_not_allowed_breaks(tmp_path):
    from checker_testkit import write_chain

    short, anywhere = _reach(tmp_path, "reach-five-steps", 5), _reach_from_anywhere(tmp_path)
    allowed = write_chain(tmp_path, "allowed", [{"skill": str(short), "may_time_out": True}, anywhere], start=HOME, episodes=100)
    result = _check(allowed, method="sim")
    h = result.handoffs[0]
    assert h.verdict is Verdict.COMPOSES and h.evidence_of("sim").details["timed_out"] == 100
    assert result.exit_code == 0 and "allowed" in h.timeouts
    strict = write_chain(tmp_path, "strict", [short, anywhere], start=HOME, episodes=100)
    result = _check(strict, method="sim")
    assert result.handoffs[0].verdict is Verdict.BREAKS and result.exit_code == 1
    assert result.whole_chain.skills[1].offered == 0  # a timeout that is not allowed ends the chain


def test_disturbances_turn_one_initial_state_into_many_trials(tmp_path):
    from checker_testkit import write_chain

    skills = [SKILLS / "arm-reach-tray.yaml", SKILLS / "arm-place.yaml"]
    exact = {"name": "home_exact", "nominal": {"pose": "home"}}
    calm = _check(write_chain(tmp_path, "calm", skills, start=exact, episodes=30), method="sim")
    assert calm.whole_chain.distinct_trajectories == 1 and calm.handoffs[0].estimate.single_start
    noisy_file = write_chain(tmp_path, "noisy", skills, start=exact, episodes=30, disturbances={"exploration": True, "sensor_noise": 0.001})
    noisy = _check(noisy_file, method="sim")
    assert noisy.whole_chain.distinct_trajectories == 30 and not noisy.handoffs[0].estimate.single_start
    assert noisy.to_dict()["whole_chain"]["disturbances"]["exploration"] is True

"""File roles of a stored skill version (standard library only: `show` imports this)."""

__all__ = ["SPEC_FILE", "PARAMS_FILE", "NORMALISER_FILE", "LEARNED_STOP_FILE", "STOP_HEADS_FILE",
           "CHOOSER_FILE", "CHOOSER_NET_FILE", "CHOOSER_KIND"]

SPEC_FILE = "spec.json"
PARAMS_FILE = "params.safetensors"
NORMALISER_FILE = "normaliser.safetensors"  # the trainer's observation (and return) statistics
# A stop head learned in options mode (present only when the version declares one):
LEARNED_STOP_FILE = "learned_stop.json"  # {"schema", "mode", "index"}
STOP_HEADS_FILE = "stop_heads.safetensors"  # every skill's stop head of that training; "index" picks this one's
# The policy over skills trained together, attached to each of those versions as a model of this kind:
CHOOSER_KIND = "chooser"
CHOOSER_FILE = "chooser.json"  # {"schema", "skills": [refs in critic order]}
CHOOSER_NET_FILE = "chooser.safetensors"  # the critic Q(s, w) the choice is greedy on

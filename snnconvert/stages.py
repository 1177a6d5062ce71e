"""The stages of a run, in order: the one list `pipeline` runs and `report` shows (neither imports the other)."""

STAGES = ["data", "train", "convert", "sweep", "export", "verify", "report"]

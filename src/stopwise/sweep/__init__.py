"""A campaign: expansion of a sweep into run specs, the manifest, and the task a Hydra
launcher runs per job."""

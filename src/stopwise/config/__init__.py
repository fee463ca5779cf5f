"""From Hydra configs to a validated, hashed RunSpec (spec), and the dataset catalog."""

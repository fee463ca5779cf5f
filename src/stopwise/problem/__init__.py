"""What a run learns from: the Problem (train/validation/test arrays, truth, noise), the
TrainingSet solvers see, losses, the models an iterate parameterizes, and hard-margin geometry."""

"""Coefficient snapshots, scores, traffic arms, the model registry and each process's copy."""

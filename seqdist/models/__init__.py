"""Evolutionary distance models: pairwise distances, variances and saturation from an alignment."""

from seqdist.models.distances import DistanceResult, distances_from_counts, inverse_variance_weights, pairwise_distances

__all__ = ["DistanceResult", "pairwise_distances", "distances_from_counts", "inverse_variance_weights"]

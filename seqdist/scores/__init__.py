"""Substitution score matrices: checks, transforms to dissimilarities, and distances from pairwise scores."""

from seqdist.scores.matrices import ScoreMatrix, check_score_matrix, load_score_matrix, transform_scores
from seqdist.scores.pairwise import score_distances

__all__ = ["ScoreMatrix", "load_score_matrix", "check_score_matrix", "transform_scores", "score_distances"]

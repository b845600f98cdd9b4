"""Placeholder until this family lands."""

METHODS = []

"""Synthetic measured cylinder-pressure traces: measurement artefacts, files, reference analyser."""

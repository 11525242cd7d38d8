"""Peer implementations raced against eqbatch: what a careful engineer
writes today when many equilibria are needed."""

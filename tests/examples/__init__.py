"""Toy extensions, each built only by following a recipe in docs/CONTRIBUTING.md."""

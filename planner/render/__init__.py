"""Renderers: they read a Record (a plain dict) and never compute statistics."""

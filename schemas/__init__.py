"""JSON Schemas of the input sheets and of results.json, shipped as package data ``verify.schemas``."""

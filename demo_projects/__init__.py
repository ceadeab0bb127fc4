"""Fictional demo projects shipped as package data ``verify.demo_projects`` (see README.md here)."""

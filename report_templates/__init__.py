"""Jinja2 templates and CSS of the PDF summary, shipped as package data ``verify.report_templates``."""

"""Pydantic models: the rail design document, API bodies and answers."""

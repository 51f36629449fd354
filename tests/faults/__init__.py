"""The fault suite (see conftest.py)."""

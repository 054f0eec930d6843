"""The REST API for tablets and integrations (``/api/v1/``); see the README's "API" section."""

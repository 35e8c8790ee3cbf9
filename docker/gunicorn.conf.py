"""gunicorn configuration for the container image: the service's own settings, unchanged."""

from service.gunicorn_config import *  # noqa: F401,F403

"""Private servers for the tests: Redis, PostgreSQL, and the real API with real Celery workers."""

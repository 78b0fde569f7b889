"""Access control: API keys, the request check, rate and concurrency limits, tenant isolation."""

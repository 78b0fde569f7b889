"""One blueprint per resource: jobs, their results, and the service's health."""

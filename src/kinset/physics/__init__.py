"""Device physics as pure functions of SI arrays. Physics never opens a file."""

"""Sources and sinks for outside systems: files, stdin and Kafka."""

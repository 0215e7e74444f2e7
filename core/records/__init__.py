"""The records: trip models, validation messages, schema migrations and the JSON/CSV exchange."""

"""Groups of `fleet` subcommands kept out of fleet/cli.py; each module has ``register(group)``."""

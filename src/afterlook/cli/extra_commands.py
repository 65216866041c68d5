"""Commands beyond the foundation (suggest, try, shape, review, casebook) register here."""

COMMANDS: dict = {}


def register(sub, add_common, add_table_opts, caution) -> None:
    """Add further subcommands to the parser (filled in as features land)."""
    return None

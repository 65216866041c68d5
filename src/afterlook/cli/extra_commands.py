"""Commands beyond the foundation (suggest, try, shape, review, casebook) register here."""

COMMANDS: dict = {}


def register(sub, add_common, add_table_opts, caution) -> None:
    """Add further subcommands to the parser (filled in as features land)."""
    from . import shape_command

    shape_command.register(sub, add_common, add_table_opts, caution)
    COMMANDS["shape"] = shape_command.run
    from . import discovery_commands

    COMMANDS.update(discovery_commands.register(sub, add_common, add_table_opts, caution))
    from . import casebook_command

    COMMANDS.update(casebook_command.register(sub, add_common, add_table_opts, caution))
    from . import review_command

    COMMANDS.update(review_command.register(sub, add_common, add_table_opts, caution))
    return None

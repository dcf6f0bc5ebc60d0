"""``topology keys``: every config section and key with its default."""

NAME = "keys"
HELP = "list every config section and key with its default and meaning"
EXAMPLE = "topology keys"


def add_arguments(p):
    pass


def run(args):
    from ..config import keys_table

    print(keys_table())
    return 0

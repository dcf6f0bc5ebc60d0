"""``topology bound``: lower bounds on the size of space and the curvature radius from alpha_min."""

NAME = "bound"
HELP = "turn 'no circles of radius >= alpha_min' into bounds on the size of space and on Omega_K"
EXAMPLE = "topology bound --alpha-min 10 configs/demo.toml --json"


def add_arguments(p):
    p.add_argument("config", nargs="?", help="TOML config ([cosmology], optional [space] and [observer])")
    p.add_argument("--alpha-min", type=float, required=True, metavar="DEG")
    p.add_argument("--json", action="store_true")
    p.add_argument("--table", metavar="FILE")


def run(args):
    from ..errors import InputError

    raise InputError("not implemented yet")

"""``python -m cavity ...``: the same command line as the ``cavity`` console script."""

from cavity.cli import main

if __name__ == "__main__":
    main(prog_name="cavity")

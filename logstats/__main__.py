"""``python -m logstats``: the command line (see :mod:`logstats.cli`)."""

from logstats.cli import main

if __name__ == "__main__":
    raise SystemExit(main())

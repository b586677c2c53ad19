"""``python -m beamaudit``: the same command line as the ``beamaudit`` script."""

from beamaudit.api.cli import main

if __name__ == "__main__":
    raise SystemExit(main())

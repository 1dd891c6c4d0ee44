"""``python -m vibsynth``: the same command line as the ``vibsynth`` console script."""

from vibsynth.cli.main import main

if __name__ == "__main__":  # pragma: no cover
    main()

"""Allow ``python -m simcheck``."""

if __name__ == "__main__":
    from simcheck.cli import main

    raise SystemExit(main())

"""Allow `python -m sweeper`."""

from sweeper.cli import main

if __name__ == "__main__":
    main()

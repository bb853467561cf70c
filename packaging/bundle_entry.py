"""Entry script for the standalone bundle (PyInstaller): the same main() as the console script."""

from phasewake.app.cli import main

if __name__ == "__main__":
    raise SystemExit(main())

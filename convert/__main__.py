"""``python -m convert`` runs the ``loopshift`` command."""

from convert.cli.main import entry_point

if __name__ == "__main__":
    entry_point()

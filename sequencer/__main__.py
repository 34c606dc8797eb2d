"""``python -m sequencer`` runs the ``benchwright`` command."""

from sequencer.cli import main

if __name__ == "__main__":
    main()

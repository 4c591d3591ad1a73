import sys

from .cli import main

sys.exit(main(restore_streams=False))

import sys

from .faces.cli import main

sys.exit(main())

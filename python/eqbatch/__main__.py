import sys

from eqbatch.cli import main

sys.exit(main())

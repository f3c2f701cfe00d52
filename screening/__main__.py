import sys

from screening.cli import main

sys.exit(main())

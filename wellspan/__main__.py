import sys

from wellspan.cli import main

sys.exit(main())

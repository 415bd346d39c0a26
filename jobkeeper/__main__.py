import sys

from jobkeeper.cli import main

sys.exit(main())

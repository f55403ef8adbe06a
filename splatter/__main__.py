import sys

from splatter.cli import main

sys.exit(main())

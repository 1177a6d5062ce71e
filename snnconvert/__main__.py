import sys

from snnconvert.cli import main

sys.exit(main())

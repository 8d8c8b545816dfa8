import sys

from nutricap.cli import main

sys.exit(main())

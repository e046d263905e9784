import sys

from seqtest.cli import main

sys.exit(main())

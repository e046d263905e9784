"""``python -m service serve|keys ...``"""

import sys

from service.cli import main

if __name__ == "__main__":
    sys.exit(main())

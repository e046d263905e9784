"""``python -m service serve|keys ...``"""

import sys

from service.commands import main

if __name__ == "__main__":
    sys.exit(main())

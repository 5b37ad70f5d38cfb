import sys

from zline.cli import main

sys.exit(main())

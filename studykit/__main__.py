import sys

from studykit.cli import main

sys.exit(main())

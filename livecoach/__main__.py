import sys

from livecoach.cli.main import main

sys.exit(main())

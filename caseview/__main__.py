import sys

from caseview.cli.main import main

sys.exit(main())

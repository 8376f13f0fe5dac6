import sys

from policy.presentation.cli import main

sys.exit(main())

from phasewake.app.cli import main

raise SystemExit(main())

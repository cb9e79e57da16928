from benchlog.views.cli import main

raise SystemExit(main())

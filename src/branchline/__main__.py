from branchline.cli import main

raise SystemExit(main())

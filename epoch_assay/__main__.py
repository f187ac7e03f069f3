from epoch_assay.cli import main

raise SystemExit(main())

from bayes_rr.cli import main

main()

from allowance.console import main

main()

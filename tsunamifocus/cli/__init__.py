"""The command line: ``tsunamifocus <command>``.

:mod:`.app` holds the parser, logging and exit codes; each command is one small module
(``configure(parser)``, ``run(args)``, ``NAME``, ``HELP``) listed explicitly in :data:`.app.COMMANDS`.
"""

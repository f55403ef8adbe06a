from splatter.cli import run

run()

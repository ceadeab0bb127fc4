from verify.cli import app

app(prog_name="verify")

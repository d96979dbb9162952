# models: panel -> regression results (liqpanel.models)
rule models:
    input:
        f"{WORK}/panel.parquet",
    output:
        results=f"{WORK}/models/regressions.parquet",
        table=f"{WORK}/models/regression_table.parquet",
    params:
        models=CONFIG["models"],
    run:
        stages.models(CONFIG, input[0], output.results, output.table)

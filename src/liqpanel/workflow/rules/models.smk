# models: panel -> regressions, sorts, liquidity factor, proxy validation (liqpanel.models)
rule models:
    input:
        panel=f"{WORK}/panel.parquet",
        monthly=f"{WORK}/monthly.parquet",
        factors=[CONFIG["inputs"]["factors"]] if CONFIG["inputs"]["factors"] else [],
    output:
        directory(f"{WORK}/models"),
    params:
        models=CONFIG["models"],
        measures=CONFIG["measures"],
    run:
        from liqpanel.models.job import run_models

        run_models(input.panel, input.monthly, output[0], inputs=SETTINGS.inputs, measures=SETTINGS.measures,
                   models=SETTINGS.models)

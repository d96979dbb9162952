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
        stages.models(CONFIG, input.panel, input.monthly, output[0])

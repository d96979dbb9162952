# study: which estimator is closest to the truth under this market's conditions (liqpanel.study)
rule study:
    input:
        daily=expand(f"{WORK}/daily/month={{month}}/daily.parquet", month=MONTHS),
        monthly=f"{WORK}/monthly.parquet",
    output:
        directory(f"{WORK}/study"),
    params:
        study={k: v for k, v in CONFIG["study"].items() if k != "in_report"},
        measures=CONFIG["measures"],
        market=CONFIG.get("market"),
        markets=CONFIG.get("markets"),
    run:
        stages.study(CONFIG, list(input.daily), input.monthly, output[0])


# The study alone (`make study`, `liqpanel study`): results/study-<run-id>/
rule study_results:
    input:
        f"{WORK}/study",
    output:
        directory(f"{RESULTS}/study-{RUN_ID}"),
    run:
        stages.study_report(CONFIG, RUN_ID, input[0], output[0], started=STARTED, command=COMMAND)

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
        from liqpanel.study.job import run_study

        run_study(list(input.daily), input.monthly, output[0], inputs=SETTINGS.inputs, sample=SETTINGS.sample,
                  market=SETTINGS.market, measures=SETTINGS.measures, study=SETTINGS.study)


# The study alone (`make study`, `liqpanel study`): results/study-<run-id>/
rule study_results:
    input:
        f"{WORK}/study",
    output:
        directory(f"{RESULTS}/study-{RUN_ID}"),
    run:
        from liqpanel.study.job import run_study_report

        run_study_report(RUN_ID, input[0], output[0], started=STARTED, command=COMMAND, settings=SETTINGS)

import tracer

tracer.ingest("work", "corpora_demo/archive.jsonl.gz")  # the demo archive (ingesting it again changes nothing)
ws = tracer.open_workspace("work")

m = tracer.measure(ws, "configs/demo_tests.toml", "gazette_outlet")
print(m)                    # the summary table, its warnings and what the columns mean
df = m.summary              # a pandas DataFrame: one row per test and slice (also m.words, m.leave_one_out)

t = tracer.trace(ws, "configs/demo_tests.toml", "gazette_outlet", verify=3)
print(t.verdict)            # did retraining without the top sources and documents confirm the estimates?
t.sources                   # a DataFrame: what each source contributes to the association
t.documents.head()          # the documents that carry it most

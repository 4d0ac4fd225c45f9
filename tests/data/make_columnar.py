"""Writes the columnar fixtures of the tests from the CSV fixtures beside this script,
with pyarrow (a reference writer outside the project). Run from this folder:

    pip install pyarrow && python3 make_columnar.py

The outputs are committed; the tests compare each with its CSV twin.
"""
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.feather as feather
import pyarrow.parquet as pq

good = pacsv.read_csv("good.csv")
# Labels dictionary-encoded (what pandas categoricals become), f2 as float32, the trusted
# column's empty cells as nulls; two row groups so parts are exercised.
table = pa.table(
    {
        "id": good["id"],
        "f1": good["f1"],
        "f2": good["f2"].cast(pa.float32()),
        "label": good["label"].dictionary_encode(),
        "trusted": good["trusted"],
    }
)
pq.write_table(table, "good.parquet", row_group_size=4)
feather.write_feather(table, "good.feather")  # Feather v2, lz4-compressed by default

probs = pacsv.read_csv("probs_good.csv")
pq.write_table(probs, "probs_good.parquet")
classes = ["bird", "cat", "dog"]  # the data's class order (natural order of the names)
rows = [[probs[c][i].as_py() for c in classes] for i in range(probs.num_rows)]
listed = pa.table(
    {
        "id": probs["id"],
        "p": pa.array(rows, type=pa.list_(pa.float64(), len(classes))),
    }
)
pq.write_table(listed, "probs_list.parquet")

# Bad inputs: a feature with a null, a text feature, a truncated file, a missing class.
with_null = table.set_column(1, "f1", pa.array([0.5, 1.5, 2.5, 0.7, 1.1, None]))
pq.write_table(with_null, "null_feature.parquet", row_group_size=4)
text_feature = table.set_column(1, "f1", pa.array(["a", "b", "c", "d", "e", "f"]))
pq.write_table(text_feature, "text_feature.parquet")
whole = open("good.parquet", "rb").read()
open("truncated.parquet", "wb").write(whole[: len(whole) // 2])
pq.write_table(probs.drop_columns(["dog"]), "probs_missing_class.parquet")

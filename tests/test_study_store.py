"""The study store under concurrent access: a reader polling while a runner creates the store.

No JAX work here: stores are created from a study definition alone, many times over.
"""

import threading

from smle.errors import SmleInputError
from smle.study import Design, Estimator, Study, study_status
from smle.study.store import Store

TRUTH = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)


def test_a_reader_never_sees_a_store_without_its_tables(tmp_path):
    """A poller of :func:`study_status` sees either "does not exist" or a complete store, never a bare file.

    Before stores were created atomically, a reader between the file's creation and its first
    table failed with "no such table: meta" (5 of 5 polls of a starting study). Here 150 stores
    are created while a thread polls each path as fast as it can; any other error fails the test.
    """
    study = Study("race", 3, (Design("a", "sv", TRUTH, 200, 4, Estimator(n_draws=16)),
                              Design("b", "sv", TRUTH, 300, 2, Estimator(n_draws=16))))
    paths = [tmp_path / f"s{i}.sqlite" for i in range(150)]
    current = {"index": 0}
    finished = threading.Event()
    seen = {"absent": 0, "complete": 0}
    errors = []

    def poll():
        while not finished.is_set():
            path = paths[current["index"]]
            try:
                status = study_status(path)
            except SmleInputError as error:
                if "does not exist" not in str(error):
                    errors.append(f"{path.name}: {error}")
                    return
                seen["absent"] += 1
            except Exception as error:  # noqa: BLE001 - any other failure is the defect under test
                errors.append(f"{path.name}: {type(error).__name__}: {error}")
                return
            else:
                if (status["planned"], status["missing"], len(status["designs"])) != (6, 6, 2):
                    errors.append(f"{path.name}: incomplete store seen: {status}")
                    return
                seen["complete"] += 1

    reader = threading.Thread(target=poll)
    reader.start()
    try:
        for i, path in enumerate(paths):
            current["index"] = i
            Store(path, study).close()
    finally:
        finished.set()
        reader.join()
    assert not errors, errors[0]
    assert seen["complete"] > 0  # the reader did read finished stores
    assert not list(tmp_path.glob(".*creating"))  # no temporary files left behind

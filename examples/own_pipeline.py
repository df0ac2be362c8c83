"""Use the per-object fit in your own pipeline, spread over a local Dask cluster.

Scenario (our own): you already have a pipeline that hands out light curves
and collects one row per source. ``longwave.survey.fit_object`` is the unit of
work: numpy arrays in, an :class:`~longwave.storage.ObjectResult` out, bad
data recorded rather than raised. Here it runs two ways on a LocalCluster
bound to 127.0.0.1: as a Dask bag map, and as futures collected as they
complete.

Run: ``python examples/own_pipeline.py`` (about 20 s).
"""

import dask.bag as db
from distributed import Client, LocalCluster, as_completed

from longwave.demo import select_classes, simulate_campaign
from longwave.survey import fit_object


def fit_one(source):
    """One source of our pipeline: (id, t, y, err) -> a small dict of what we keep."""
    ident, t, y, err = source
    out = fit_object(t, y, err, model_spec="matern32", clip=5.0, id=ident).result
    return {"id": out.id, "status": out.status, "scale": out.params.get("matern32.scale"),
            "seconds": out.runtime}


def main() -> None:
    # The two classes whose true kernel is the Matern-3/2 we fit.
    campaign = simulate_campaign(40, classes=select_classes("flickering,wandering"), seed=4)
    sources = list(zip(campaign.ids, campaign.times, campaign.values, campaign.errors))
    truth = dict(zip(campaign.ids, campaign.truth["scale"]))
    # One thread per worker: the fits are single-threaded numeric code and
    # parallelism comes from the processes.
    with LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as client:
        # 1. A bag: partitions of sources, mapped and gathered.
        rows = db.from_sequence(sources, npartitions=6).map(fit_one).compute()
        ok = [r for r in rows if r["status"] == "ok"]
        print(f"bag: {len(rows)} sources, {len(ok)} ok")

        # 2. Futures: submit, then handle each result as soon as it is ready.
        futures = [client.submit(fit_one, s, pure=False) for s in sources[:20]]
        for future in as_completed(futures):
            r = future.result()
            print(f"  {r['id']}: {r['status']}, scale {r['scale']:.3g} d "
                  f"(true {truth[r['id']]:.3g})")
    assert len(rows) == len(sources) and len(ok) >= 0.9 * len(rows)


if __name__ == "__main__":
    main()

"""The app factory: engine, templates and routes, all kept on ``app.state``."""

from __future__ import annotations

from contextlib import asynccontextmanager

from fastapi import FastAPI
from fastapi.templating import Jinja2Templates

import foldwise
from foldwise.keys import KeyFile
from foldwise.settings import Settings
from foldwise.store import make_engine
from foldwise.web import api, errors, live_reports, report, sharing, shipping
from foldwise.web.assets import app_assets, static_url
from foldwise.web.charts.base import chart_style
from foldwise.web.compression import Compressed
from foldwise.web.formatting import CAUTION, FILTERS, TESTS
from foldwise.web.methods import MethodTable
from foldwise.web.metric_display import API_ORIENTATION, displays_json, metric_display
from foldwise.web.openapi import openapi_of
from foldwise.web.pages import (
    assessment_detail,
    assessments_compare,
    compute_cost,
    ensembles,
    fold_winners,
    index,
    inner_detail,
    interval_method,
    live_runs,
    optimism,
    paired_comparison,
    ranking,
    score_distributions,
)
from foldwise.web.resources import templates_dir
from foldwise.web.security import Guard


def create_app(settings: Settings) -> FastAPI:
    # The interactive docs would load their scripts from a CDN, so they are off; the schema stays.
    app = FastAPI(title="foldwise", version=foldwise.__version__, docs_url=None, redoc_url=None,
                  description=f"The JSON answers behind the foldwise dashboard. {API_ORIENTATION}",
                  openapi_url="/api/openapi.json", lifespan=_lifespan)
    keys = KeyFile(settings.keys_path())
    if not settings.loopback and not keys.active("read"):
        raise PermissionError(f"refusing to serve on {settings.host} without a read key: every visitor would "
                              "read the store; create one with `foldwise keys create --read`")
    keys.ensure_write_key()
    app.state.settings, app.state.keys = settings, keys
    app.state.engine = make_engine(settings.db_url)
    templates = Jinja2Templates(directory=str(templates_dir()))
    templates.env.filters.update(FILTERS)
    templates.env.tests.update(TESTS)
    templates.env.globals.update(caution=CAUTION, version=foldwise.__version__, static_url=static_url,
                                 chart_style=chart_style(), metric_display=metric_display,
                                 metric_displays=displays_json)
    app.state.templates = templates

    # Static files and plotly.js under /static/<digest>/<name>, gzipped once and cached for a year.
    app.state.assets = app_assets()
    app.add_route("/static/{path:path}", app.state.assets.respond, name="static", include_in_schema=False)
    app.include_router(api.router)
    app.include_router(api.health)
    app.include_router(index.router)
    app.include_router(assessment_detail.router)
    app.include_router(report.router)
    app.include_router(shipping.router)
    app.include_router(interval_method.router)
    app.include_router(score_distributions.router)
    app.include_router(fold_winners.router)
    app.include_router(optimism.router)
    app.include_router(inner_detail.router)
    app.include_router(compute_cost.router)
    app.include_router(paired_comparison.router)
    app.include_router(ranking.router)
    app.include_router(assessments_compare.router)
    app.include_router(ensembles.router)
    app.include_router(sharing.router)
    app.include_router(live_runs.router)
    app.include_router(live_reports.router)
    app.openapi = openapi_of(app, reads_need_key=settings.reads_need_key)
    errors.install(app, templates)
    app.add_middleware(Guard, keys=keys, reads_need_key=settings.reads_need_key,
                       max_body_bytes=settings.max_body_bytes,
                       methods=MethodTable(app.openapi, extra={app.openapi_url: {"GET", "HEAD"}}))
    # Pages and API answers compressed on the way out (a chart page's figures are mostly JSON text);
    # static files arrive compressed already and pass through.
    app.add_middleware(Compressed, minimum_size=1024)

    return app


@asynccontextmanager
async def _lifespan(app: FastAPI):
    yield
    app.state.engine.dispose()

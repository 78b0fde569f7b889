"""A typed Python client for the drawyard API, used by pipelines and by the `drawyard` command."""

from service.client.errors import ClientError, ProblemError, ServiceUnreachable
from service.client.http import DrawyardClient
from service.client.model_records import ModelPage, ModelVersion, RegisteredModel, VersionPage
from service.client.records import (
    ChainProgress,
    FailedCheck,
    FileDownload,
    Job,
    JobPage,
    Verdict,
)
from service.client.retrying import RetryPolicy
from service.client.waiting import WaitTimedOut, wait_for_job

__all__ = [
    "ChainProgress",
    "ClientError",
    "DrawyardClient",
    "FailedCheck",
    "FileDownload",
    "Job",
    "JobPage",
    "ModelPage",
    "ModelVersion",
    "ProblemError",
    "RegisteredModel",
    "RetryPolicy",
    "ServiceUnreachable",
    "Verdict",
    "VersionPage",
    "WaitTimedOut",
    "wait_for_job",
]

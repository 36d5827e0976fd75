# syntax=docker/dockerfile:1
# The Scorer service as a container image.
#
#   docker build -t scorer .
#   docker run --read-only --tmpfs /tmp -p 8080:8080 -p 8081:8081 \
#     -v scorer-data:/data -v "$PWD/models:/models:ro" \
#     -e Scorer__Keys__0__Name=ops -e Scorer__Keys__0__Key="$(openssl rand -hex 24)" -e Scorer__Keys__0__Roles__0=admin \
#     scorer
#
# REST (and /healthz, /readyz, /metrics) on 8080, gRPC over h2c on 8081, both on every address of the container; the
# service refuses to bind beyond loopback without API keys (Scorer:Keys), so give at least one. The only writable
# paths it needs are /data (the SQLite store, when Scorer:Store:Kind is sqlite) and /tmp (.NET's diagnostics sockets):
# the image runs with a read-only root filesystem. Everything else is in deploy/README.md.

# ---- build: the SDK image publishes the service and the health probe --------------------------------------------------
FROM mcr.microsoft.com/dotnet/sdk:10.0 AS build
ENV DOTNET_CLI_TELEMETRY_OPTOUT=1 DOTNET_NOLOGO=1 DOTNET_SKIP_FIRST_TIME_EXPERIENCE=1
WORKDIR /src

# What the publish reads, and nothing else (.dockerignore keeps bin/ and obj/ out): the repository-wide build settings
# and central package versions, the sources, the gRPC contract, the JSON Schema and the demo models they embed.
COPY global.json Directory.Build.props Directory.Packages.props .editorconfig ./
COPY eng/ eng/
COPY protos/ protos/
COPY docs/model-file.schema.json docs/
COPY examples/pump-bearings/model.json examples/pump-bearings/
COPY examples/card-payments/model.json examples/card-payments/
COPY src/ src/
COPY deploy/container/probe/ deploy/container/probe/

# The NuGet cache is a BuildKit cache mount: packages are downloaded once, not on every source change.
RUN --mount=type=cache,id=scorer-nuget,target=/root/.nuget/packages \
    dotnet publish src/Scorer.Server/Scorer.Server.csproj -c Release -o /out/app -p:UseAppHost=false \
 && dotnet publish deploy/container/probe/Scorer.HealthProbe.csproj -c Release -o /out/probe

# The data folder, as an entry of its own so that COPY --chown below gives it to the service's user (a volume created
# from the image starts with that owner).
RUN mkdir -p /out/volumes/data

# ---- runtime: the ASP.NET Core runtime image, non-root ----------------------------------------------------------------
FROM mcr.microsoft.com/dotnet/aspnet:10.0 AS runtime
WORKDIR /app
COPY --from=build /out/app/ /app/
COPY --from=build /out/probe/ /app/probe/
COPY --from=build --chown=1654:1654 /out/volumes/ /

# Settings for a container (docs/api.md lists them all); every one can be overridden with -e or a ConfigMap.
# ASPNETCORE_HTTP_PORTS is emptied: the service binds its own endpoints (Scorer:Http, Scorer:Grpc).
ENV ASPNETCORE_HTTP_PORTS="" \
    Scorer__Http=0.0.0.0:8080 \
    Scorer__Grpc=0.0.0.0:8081 \
    Scorer__ModelsPath=/models \
    Scorer__SeedDemoModels=false \
    Scorer__Store__Kind=sqlite \
    Scorer__Store__Path=/data/scorer.db \
    Scorer__LogFormat=json

# The SQLite store (and its WAL files) live on /data; model files are read from /models (read-only is fine; the
# service's recalibrate call writes its new model file there, so mount it writable where that is used).
VOLUME ["/data", "/models"]

EXPOSE 8080 8081

# The image's non-root user 'app' (APP_UID 1654 in the .NET images), numeric so that Kubernetes can check runAsNonRoot.
USER 1654:1654

# Liveness for plain Docker: the probe GETs /healthz on the port of Scorer__Http, with no shell and no curl.
HEALTHCHECK --interval=30s --timeout=5s --start-period=30s --retries=3 \
    CMD ["dotnet", "/app/probe/Scorer.HealthProbe.dll"]

ENTRYPOINT ["dotnet", "/app/Scorer.Server.dll"]

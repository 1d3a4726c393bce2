# The plumbline image: one static binary (controller, evaluate, datacheck,
# backtest) on a distroless base. Build: make docker-build IMG=...
FROM golang:1.26 AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY api/ api/
COPY controllers/ controllers/
COPY internal/ internal/
COPY main.go ./
ARG VERSION=dev
RUN CGO_ENABLED=0 go build -trimpath -ldflags "-s -w -X main.version=${VERSION}" -o /out/plumbline .

FROM gcr.io/distroless/static:nonroot
COPY --from=build /out/plumbline /plumbline
USER 65532:65532
ENTRYPOINT ["/plumbline"]

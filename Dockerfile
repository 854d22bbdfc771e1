# curvekeeper: a static binary on a minimal image, run as a non-root user.
# The container expects a PostgreSQL server: set DATABASE_URL
# (the private-cluster mode is for a workstation, not for a container).
#
#   docker build -t curvekeeper .
#   docker run -p 8080:8080 -e DATABASE_URL=postgres://user:pass@db:5432/curvekeeper curvekeeper

FROM golang:1.27.3-bookworm AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
RUN CGO_ENABLED=0 go build -trimpath -ldflags="-s -w" -o /out/curvekeeper ./cmd/curvekeeper

FROM gcr.io/distroless/static-debian12:nonroot
COPY --from=build /out/curvekeeper /usr/local/bin/curvekeeper
ENV CURVEKEEPER_LISTEN=:8080
EXPOSE 8080
USER nonroot:nonroot
ENTRYPOINT ["/usr/local/bin/curvekeeper"]
CMD ["serve"]

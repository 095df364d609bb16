# slopeshift worker image: Node 20 on Debian (glibc, for the DuckDB prebuilt binary).
FROM node:20-bookworm-slim AS build
WORKDIR /app
COPY package.json package-lock.json ./
RUN npm ci --ignore-scripts
COPY tsconfig.json tsconfig.build.json ./
COPY scripts ./scripts
COPY src ./src
RUN npm run build && npm prune --omit=dev

FROM node:20-bookworm-slim
ENV NODE_ENV=production
WORKDIR /app
COPY --from=build /app/node_modules ./node_modules
COPY --from=build /app/dist ./dist
COPY package.json ./
COPY schemas ./schemas
COPY config ./config
# Warm the CLI's V8 code cache (dist/bundle/cache/, see README "Start-up"): the image runs as `node` and
# cannot write it later. The demo and a rerun of its job also smoke-test the image; their data is dropped.
RUN node dist/bundle/slopeshift.js --version > /dev/null \
  && node dist/bundle/slopeshift.js check-config --config config/demo.yaml > /dev/null \
  && node dist/bundle/slopeshift.js demo --dir demo-out > /dev/null \
  && node dist/bundle/slopeshift.js run --config config/demo.yaml > /dev/null \
  && rm -rf demo-out
USER node
# Exec form: signals reach node directly, so SIGTERM stops a run cleanly (exit 143).
ENTRYPOINT ["node", "dist/bundle/slopeshift.js"]
CMD ["--help"]

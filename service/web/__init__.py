"""The reviewers' pages: server-rendered by the API's own app, assets served locally."""

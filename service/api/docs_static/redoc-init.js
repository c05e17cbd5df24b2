// Starts Redoc on /redoc (a file of its own: the page allows no inline script).
window.addEventListener("load", () => {
  const root = document.getElementById("redoc");
  Redoc.init(root.dataset.openapiUrl, {}, root);
});

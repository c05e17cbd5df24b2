// seqaudit dashboard: a little progressive enhancement; every page works without it.
document.addEventListener("DOMContentLoaded", () => {
  // Filter menus apply as soon as they change.
  for (const select of document.querySelectorAll("select.autosubmit")) {
    select.addEventListener("change", () => select.form.requestSubmit());
  }
  // "/" jumps to the search box, as in many tools.
  const search = document.getElementById("search");
  if (search) {
    document.addEventListener("keydown", (event) => {
      if (event.key === "/" && document.activeElement.tagName !== "INPUT") {
        event.preventDefault();
        search.focus();
      }
    });
  }
  // Buttons that undo evidence ask first (the form still posts without script).
  for (const button of document.querySelectorAll("button[data-confirm]")) {
    button.addEventListener("click", (event) => {
      if (!window.confirm(button.dataset.confirm)) event.preventDefault();
    });
  }
  // Buttons of forms that change data are disabled once pressed, so a double click posts once.
  for (const form of document.querySelectorAll("form[method=post]")) {
    form.addEventListener("submit", () => {
      for (const button of form.querySelectorAll("button")) button.disabled = true;
    });
  }
});
